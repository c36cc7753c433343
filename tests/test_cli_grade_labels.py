"""No report names a grade the model did not give; ``--grade-labels`` gives the words.

The label order 0, 1, 2, 3, 4A, 4B, 5 is the CAD-RADS 2.0 stenosis scale (Cury RC et al.,
"CAD-RADS 2.0 - 2022 Coronary Artery Disease-Reporting and Data System", JCCT 2022), so output
column 5 of a model in that order is category 4B, not 5.
"""

import json
import re
import warnings

import pytest
import torch

from explain.cli import main
from explain.phantom import write_phantom_case

# torch.jit.load warns that TorchScript is deprecated in torch 2.13 (as in tests/model/test_load.py)
pytestmark = pytest.mark.filterwarnings("ignore::DeprecationWarning:torch.jit")

# A claim of a category: "CAD-RADS" followed by one of the CAD-RADS 2.0 categories (Cury 2022).
CLAIM = re.compile(r"CAD-RADS\s+(?:<b>)?(0|1|2|3|4A|4B|5)\b")
FAST = ["--methods", "gradient", "--points", "6", "--size", "8", "--pixel-mm", "0.6", "--quiet"]


class ColumnFive(torch.nn.Module):
    """Protocol model without grade labels whose output column 5 always has the top score."""

    def __init__(self):
        super().__init__()
        self.lin = torch.nn.Linear(2, 7)
        with torch.no_grad():
            self.lin.weight.copy_(torch.linspace(-0.01, 0.01, 14).reshape(7, 2))
            self.lin.bias.copy_(torch.tensor([0.0, 1.0, 2.0, 3.0, 4.0, 9.0, 5.0]))

    @torch.jit.export
    def encode_segments(self, x):
        return torch.stack([x.mean(dim=(2, 3, 4)), x.amax(dim=(2, 3, 4))], dim=-1) / 1000.0

    @torch.jit.export
    def head(self, pooled):
        return self.lin(pooled)

    def forward(self, x):
        return self.head(self.encode_segments(x).max(dim=1).values)


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    root = tmp_path_factory.mktemp("labels")
    case = write_phantom_case(root / "case", seed=0, lesions=[])
    model = root / "colfive.ts"
    # torch.jit.script is deprecated in torch 2.13; a scripted protocol model is the case that
    # loses its grade labels, so the test still builds one.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        torch.jit.save(torch.jit.script(ColumnFive()), model)
    return root, case, model


def _run(capsys, out, case, model, *extra):
    code = main(["explain", "--case", str(case), "--model", str(model), "--out", str(out),
                 *FAST, *extra])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def _texts(out):
    return {name: (out / name).read_text(encoding="utf-8")
            for name in ("report.html", "report.json", "segments.csv")}


def test_no_labels_no_category_claim(inputs, capsys):
    root, case, model = inputs
    out = root / "plain"
    code, stdout, err = _run(capsys, out, case, model)
    assert code == 0, err
    texts = {**_texts(out), "stdout": stdout}
    for name, text in texts.items():
        assert not CLAIM.search(text), f"{name} names a CAD-RADS category: {CLAIM.search(text)}"
    assert "output column 5 has the top score" in texts["report.html"]
    assert "output column 5 has the top score" in stdout
    report = json.loads(texts["report.json"])
    assert report["prediction"]["grade"] is None and report["prediction"]["column"] == 5
    # auto without labels is the top column (explain.model.targets: "auto" -> "predicted")
    assert report["target"]["label"] == 5


def test_grade_labels_option_names_the_category(inputs, capsys):
    root, case, model = inputs
    out = root / "labelled"
    code, stdout, err = _run(capsys, out, case, model, "--grade-labels", "0,1,2,3,4A,4B,5")
    assert code == 0, err
    texts = _texts(out)
    # Column 5 in CAD-RADS 2.0 order is 4B (Cury et al. 2022), never "5".
    assert "CAD-RADS 4B (output column 5)" in texts["report.html"]
    assert "CAD-RADS 4B" in stdout and "CAD-RADS 5" not in stdout
    report = json.loads(texts["report.json"])
    assert report["prediction"]["grade"] == "4B"
    assert report["model"]["grade_labels"] == ["0", "1", "2", "3", "4A", "4B", "5"]


@pytest.mark.parametrize("labels, words", [("0,,2,3,4A,4B,5", "item 2"), ("", "item 1"),
                                           ("0,1,2", "3 labels")])
def test_bad_grade_labels_exit_2_one_line(inputs, capsys, labels, words):
    root, case, model = inputs
    out = root / f"bad{len(labels)}"
    code, _, err = _run(capsys, out, case, model, "--grade-labels", labels)
    assert code == 2
    assert err.count("\n") == 1 and words in err and "Traceback" not in err
    assert not out.exists()


def test_help_names_the_sidecar_and_the_option(capsys):
    with pytest.raises(SystemExit):
        main(["explain", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert "--grade-labels" in text and "<model>.spec.json" in text
