"""The zoo of model styles (tests/model/zoo.py) through ``culprit-lens explain`` with the defaults.

Each style either wraps (automatically or through the protocol methods) and explains with the
default methods, exit status 0, or is refused with one line on stderr, exit status 2 and no
output folder. The phantom is cut to three segments and sampled coarsely (6 points of 8 x 8
pixels, given once in the sidecar file ``zoo.spec.json``) to keep the runs short.
"""

from __future__ import annotations

import importlib.util
import json
import shutil
from pathlib import Path

import pytest
import torch

from explain.cli import main
from explain.phantom import write_phantom_case

# torch.jit.load warns that TorchScript is deprecated in torch 2.13 (as in test_load.py)
pytestmark = pytest.mark.filterwarnings("ignore::DeprecationWarning:torch.jit")

HERE = Path(__file__).parent
SPEC = {"points": 6, "size": 8, "pixel_mm": 0.6}
_spec = importlib.util.spec_from_file_location("zoo", HERE / "zoo.py")
zoo = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(zoo)


#: what the notes of a style must say about what was assumed or done
NOTES = {
    "Conv3dHeadModule": "submodule",
    "Float64Model": "float64",
    "TrainModeBatchNorm": "eval()",
    "FoldedChannels2D": "gradcam: skipped",
}


@pytest.fixture(scope="module")
def place(tmp_path_factory):
    """A three-segment phantom, and the zoo file with its sidecar spec."""
    root = tmp_path_factory.mktemp("zoo")
    case = write_phantom_case(root / "case", seed=0, lesions=["2:70"])
    manifest = json.loads(case.read_text())
    manifest["segments"] = manifest["segments"][:3]
    case.write_text(json.dumps(manifest))
    shutil.copy(HERE / "zoo.py", root / "zoo.py")
    (root / "zoo.spec.json").write_text(json.dumps(SPEC))
    return root, case


def _model_argument(root, name, how):
    cls = name.split("-")[0]
    if how == "factory":
        return f"{root / 'zoo.py'}:{'tuple_heads_list' if name == 'TupleHeads-list' else cls}"
    module = getattr(zoo, cls)()
    x = torch.randn(1, 2, SPEC["points"], SPEC["size"], SPEC["size"]) * 200.0
    if how == "script":
        saved = zoo.scripted(module)
    else:
        saved = zoo.traced(module, x, protocol=how == "trace-protocol")
    path = root / f"{name}.ts"
    torch.jit.save(saved, str(path))
    (root / f"{name}.spec.json").write_text(json.dumps(SPEC))
    return str(path)


@pytest.mark.parametrize("name", sorted(zoo.OUTCOMES))
def test_style_explains_or_is_refused_in_one_line(place, name, capsys):
    root, case = place
    how, extra, outcome = zoo.OUTCOMES[name]
    out = root / f"out-{name}"
    code = main(["explain", "--case", str(case), "--model", _model_argument(root, name, how),
                 "--out", str(out), "--quiet", *extra])
    captured = capsys.readouterr()
    if isinstance(outcome, tuple):
        assert code == 2, captured.out
        assert outcome[1] in captured.err
        assert len(captured.err.strip().splitlines()) == 1, captured.err
        assert "Traceback" not in captured.err
        assert not out.exists()
        return
    assert code == 0, captured.err
    report = json.loads((out / "report.json").read_text())
    assert report["model"]["kind"] == outcome
    # the default methods ran, or each missing one is skipped with its reason in the notes
    skipped = [m for m in ("integrated_gradients", "occlusion", "gradcam")
               if m not in report["settings"]["methods"]]
    for method in skipped:
        assert any(n.startswith(f"{method}: skipped") for n in report["notes"]), report["notes"]
    assert {"integrated_gradients", "occlusion"} <= set(report["settings"]["methods"])
    if "gradcam" in report["settings"]["methods"]:
        # every zoo model's Grad-CAM layer follows a chain of nn convolutions, so its cells are
        # placed from the layers (convolution arithmetic), not by the resize convention
        assert report["settings"]["method_options"]["gradcam"]["geometry_from"] == "layers"
    if name in NOTES:
        assert any(NOTES[name] in n for n in report["notes"]), report["notes"]
