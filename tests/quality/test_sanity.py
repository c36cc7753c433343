"""Cascading randomisation (Adebayo, Gilmer, Muelly, Goodfellow, Hardt, Kim 2018).

The paper's test: a saliency method whose map survives the randomisation of the model's weights
fails. Here it is run on the bundled reference network (which must pass for gradient) and on a
hand-built model whose |map| cannot change with its weights (which must fail).
"""

import dataclasses
import importlib.util
from pathlib import Path

import numpy as np
import pytest
import torch

from explain.case import load_case
from explain.errors import ModelError
from explain.geometry import sample_case
from explain.model import load_model, wrap_model
from explain.quality.sanity import (PASS_BELOW, cascading_randomisation, parameterised_layers)

_spec = importlib.util.spec_from_file_location("sanity_models",
                                               Path(__file__).with_name("sanity_models.py"))
models = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(models)

#: Few segments keep the test lean: the culprit's (7) and three neighbours.
SEGMENTS = (5, 6, 7, 11)


@pytest.fixture(scope="module")
def demo_x(demo_case):
    case = load_case(demo_case)
    case = dataclasses.replace(case, segments=tuple(s for s in case.segments
                                                    if s.id in SEGMENTS))
    return sample_case(case, points=32, size=24, pixel_mm=0.5).tensor()


def test_reference_network_passes_for_gradient(demo_x):
    model = load_model("builtin:reference")
    before = {k: v.clone() for k, v in model.module.state_dict().items()}
    result = cascading_randomisation(
        model, demo_x, methods=("gradient", "integrated_gradients", "gradcam"), target="auto",
        method_options={"integrated_gradients": {"steps": 8}}, seed=0)
    # output end first: the head's last layer, down to the first convolution
    assert [layer.name for layer in result.layers] == [
        "classifier.2", "classifier.0", "along.2", "along.0", "features.2", "features.0"]
    assert all(layer.reinit == "reset_parameters" for layer in result.layers)
    assert result.passed["gradient"] is True
    assert result.final_spearman["gradient"] < PASS_BELOW
    for method in result.methods:
        assert result.spearman[method][0] == pytest.approx(1.0)      # depth 0: the trained maps
        assert result.ssim[method].shape == (7, len(SEGMENTS))
    assert len(set(result.weights_hashes)) == 7                       # every step changed weights
    # the caller's model is untouched
    after = model.module.state_dict()
    assert all(torch.equal(before[k], after[k]) for k in before)


def test_a_map_that_ignores_the_weights_fails():
    model = wrap_model(models.WeightBlind())
    x = torch.randn(1, 3, 6, 8, 8, generator=torch.Generator().manual_seed(1)) * 150
    result = cascading_randomisation(model, x, methods=("gradient", "integrated_gradients"),
                                     target=0, seed=0)
    assert [layer.name for layer in result.layers] == ["out", "offset"]
    assert result.layers[1].reinit.startswith("normal")      # Offset has no reset_parameters
    for method in result.methods:
        assert result.final_spearman[method] == pytest.approx(1.0, abs=1e-9)
        assert result.passed[method] is False


def test_randomisation_is_seeded():
    model = wrap_model(models.WeightBlind())
    x = torch.randn(1, 2, 6, 8, 8, generator=torch.Generator().manual_seed(2)) * 150
    a = cascading_randomisation(model, x, methods=("gradient",), target=0, seed=3)
    b = cascading_randomisation(model, x, methods=("gradient",), target=0, seed=3)
    c = cascading_randomisation(model, x, methods=("gradient",), target=0, seed=4)
    assert a.weights_hashes == b.weights_hashes
    assert a.weights_hashes[1:] != c.weights_hashes[1:]
    assert a.to_dict()["seed"] == 3


# the test builds its TorchScript module with torch.jit.script, deprecated in torch 2.13
@pytest.mark.filterwarnings("ignore::DeprecationWarning:torch.jit")
def test_torchscript_layers_are_redrawn_in_reverse_registration_order():
    # TorchScript modules take no forward hooks and have no reset_parameters: the documented
    # fallbacks apply, and every parameter still ends up redrawn.
    torch.manual_seed(0)
    scripted = torch.jit.script(models.Scriptable())
    before = {k: v.clone() for k, v in scripted.state_dict().items()}
    model = wrap_model(scripted)
    x = torch.randn(1, 3, 6, 8, 8, generator=torch.Generator().manual_seed(1)) * 150
    result = cascading_randomisation(model, x, methods=("gradient",), target=0)
    assert [(layer.name, layer.seen_in_forward) for layer in result.layers] == [
        ("out", False), ("enc", False)]
    assert all(layer.reinit.startswith("normal") for layer in result.layers)
    assert all(torch.equal(before[k], v) for k, v in scripted.state_dict().items())
    assert len(set(result.weights_hashes)) == 3


def test_a_model_without_parameters_is_refused():
    model = wrap_model(models.NoParameters())
    x = torch.zeros(1, 2, 4, 6, 6)
    with pytest.raises(ModelError, match="has no parameters.*nothing to randomise"):
        cascading_randomisation(model, x, methods=("gradient",), target=0)


def test_layers_no_forward_pass_saw_come_last():
    class Net(torch.nn.Module):
        def __init__(self):
            super().__init__()
            self.spare = torch.nn.Linear(2, 2)   # registered first, never run
            self.first, self.second = torch.nn.Linear(2, 2), torch.nn.Linear(2, 2)

        def forward(self, x):
            return self.second(self.first(x))

    net = Net()
    found = parameterised_layers(net, run=lambda: net(torch.ones(1, 2)))
    assert [(n, seen) for n, _, seen in found] == [
        ("second", True), ("first", True), ("spare", False)]


def test_result_dict_has_the_pass_rule_and_no_nan():
    model = wrap_model(models.WeightBlind())
    x = torch.randn(1, 2, 6, 8, 8, generator=torch.Generator().manual_seed(2)) * 150
    d = cascading_randomisation(model, x, methods=("gradient",), target=0).to_dict()
    assert str(PASS_BELOW) in d["pass_rule"]
    assert d["methods"]["gradient"]["passed"] is False
    assert len(d["methods"]["gradient"]["spearman"]) == len(d["layers"]) + 1
    assert all(v is None or np.isfinite(v) for v in d["methods"]["gradient"]["ssim_mean"])
