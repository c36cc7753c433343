"""Loading: FILE.py:FACTORY with weights (torch.load weights_only), TorchScript, sidecar spec."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
import torch

from explain.errors import InputError, ModelError
from explain.model import CrossSectionSpec, load_model

HERE = Path(__file__).parent


def _factory(tmp_path):
    shutil.copy(HERE / "models.py", tmp_path / "models.py")
    return tmp_path / "models.py"


def test_factory_weights_and_sidecar(tmp_path):
    path = _factory(tmp_path)
    import importlib.util

    spec = importlib.util.spec_from_file_location("tm2", path)
    tm = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(tm)
    trained = tm.SmallConv(seed=5)
    torch.save(trained.state_dict(), tmp_path / "w.pt")
    (tmp_path / "models.spec.json").write_text(
        json.dumps({"points": 4, "size": 6, "pixel_mm": 0.4, "grade_labels": ["0", "1", "2", "3"]})
    )
    w = load_model(f"{path}:SmallConv", weights=tmp_path / "w.pt")
    assert w.spec == CrossSectionSpec(4, 6, 0.4) and w.grade_labels == ("0", "1", "2", "3")
    x = torch.randn(1, 2, 4, 6, 6) * 100
    torch.testing.assert_close(w(x), trained(x))
    # explicit options win over the sidecar file
    w2 = load_model(f"{path}:SmallConv", spec=CrossSectionSpec(4, 6, 0.5))
    assert w2.spec.pixel_mm == 0.5


# the test builds its TorchScript files with torch.jit.script, deprecated in torch 2.13
@pytest.mark.filterwarnings("ignore::DeprecationWarning:torch.jit")
def test_torchscript_protocol_and_plain(tmp_path):
    class Scripted(torch.nn.Module):
        def __init__(self):
            super().__init__()
            self.lin = torch.nn.Linear(2, 3)

        @torch.jit.export
        def encode_segments(self, x):
            return torch.stack([x.mean(dim=(2, 3, 4)), x.amax(dim=(2, 3, 4))], dim=-1)

        @torch.jit.export
        def head(self, pooled):
            return self.lin(pooled)

        def forward(self, x):
            return self.head(self.encode_segments(x).max(dim=1).values)

    net = Scripted()
    torch.jit.save(torch.jit.script(net), tmp_path / "m.ts")
    w = load_model(tmp_path / "m.ts")
    x = torch.randn(1, 3, 2, 4, 4)
    assert w.kind == "protocol" and w.name == "m"
    torch.testing.assert_close(w(x), net(x))

    class Plain(torch.nn.Module):
        def forward(self, x):
            return x.mean(dim=(2, 3, 4)).amax(dim=1, keepdim=True)

    torch.jit.save(torch.jit.script(Plain()), tmp_path / "p.pt")
    with pytest.raises(ModelError, match="encode_segments"):
        load_model(tmp_path / "p.pt").encode(x)


def test_load_errors(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        load_model(tmp_path / "missing.ts")
    (tmp_path / "junk.pt").write_bytes(b"not a model")
    with pytest.raises(ModelError, match="not a TorchScript file"):
        load_model(tmp_path / "junk.pt")
    path = _factory(tmp_path)
    with pytest.raises(InputError, match="no callable"):
        load_model(f"{path}:Nope")
    torch.save({"conv.weight": torch.zeros(1)}, tmp_path / "bad.pt")
    with pytest.raises(ModelError, match="do not fit"):
        load_model(f"{path}:SmallConv", weights=tmp_path / "bad.pt")
    # weights_only=True refuses arbitrary pickled objects
    torch.save({"x": Path("a")}, tmp_path / "evil.pt")
    with pytest.raises(ModelError, match="plain state_dict"):
        load_model(f"{path}:SmallConv", weights=tmp_path / "evil.pt")


# torch.jit.load warns that TorchScript is deprecated; as an error here it would be the cause
@pytest.mark.filterwarnings("ignore::DeprecationWarning:torch.jit")
def test_load_errors_keep_the_cause_not_only_its_class(tmp_path):
    (tmp_path / "junk.pt").write_bytes(b"not a model")
    with pytest.raises(ModelError, match=r"not a TorchScript file \(RuntimeError: \w+"):
        load_model(tmp_path / "junk.pt")
    (tmp_path / "broken.py").write_text(
        "def build():\n    raise ValueError('depth 5 is not supported\\nuse depth 3')\n")
    with pytest.raises(ModelError, match=r"ValueError: depth 5 is not supported use depth 3"):
        load_model(f"{tmp_path / 'broken.py'}:build")
    path = _factory(tmp_path)
    torch.save({"conv.weight": torch.zeros(1)}, tmp_path / "bad.pt")
    with pytest.raises(ModelError, match=r"do not fit the model \(RuntimeError: .*Missing key"):
        load_model(f"{path}:SmallConv", weights=tmp_path / "bad.pt")
