"""explain_case's saliency step: default methods that do not apply are skipped with the reason,
named ones are errors, cheap checks come first, a failure keeps the finished maps, and a
sampling option that conflicts with the model's spec is said to win."""

from __future__ import annotations

import numpy as np
import pytest

import explain.report.saliency as saliency
from explain.attribution.gradcam import LayerNotUsable
from explain.model import CrossSectionSpec, wrap_model
from explain.report import explain_case

SAMPLING = {"points": 8, "size": 7, "pixel_mm": 0.6}


@pytest.fixture(scope="module")
def small(synth):
    return synth.make_case(lesion_hu=60.0), synth.DarkCentre


def test_default_gradcam_without_convolution_is_skipped_with_the_reason(small):
    case, net = small
    messages = []
    e = explain_case(wrap_model(net()), case, target=1, progress=messages.append, **SAMPLING)
    assert e.settings["methods"] == ["integrated_gradients", "occlusion"]
    reason = e.settings["skipped_methods"]["gradcam"]
    assert "no Conv2d/Conv3d" in reason
    assert any(n.startswith("gradcam: skipped") and reason in n for n in e.notes)
    assert set(e.maps) == {"integrated_gradients", "occlusion"}
    # cheapest first: Integrated Gradients (50 steps) before occlusion (many windows)
    order = [m.split(": ", 1)[1] for m in messages if m.startswith("saliency")]
    assert order == ["integrated_gradients", "occlusion"]


def test_a_named_method_that_does_not_apply_is_an_error(small):
    case, net = small
    with pytest.raises(LayerNotUsable, match="no Conv2d/Conv3d"):
        explain_case(wrap_model(net()), case, target=1, methods=["gradient", "gradcam"],
                     **SAMPLING)


def test_a_failing_method_keeps_the_maps_finished_before_it(small, monkeypatch):
    case, net = small
    real = saliency._one_map

    def failing(model, x, method, *args, **kwargs):
        if method == "occlusion":
            raise RuntimeError("out of memory (simulated)")
        return real(model, x, method, *args, **kwargs)

    monkeypatch.setattr(saliency, "_one_map", failing)
    with pytest.raises(saliency.MethodFailed, match="occlusion failed: out of memory") as err:
        explain_case(wrap_model(net()), case, target=1, methods=["occlusion", "gradient"],
                     **SAMPLING)
    kept = err.value.finished_maps
    assert list(kept) == ["gradient"]  # computed first, being cheaper, and kept
    assert kept["gradient"].shape == (3, 8, 7, 7) and np.abs(kept["gradient"]).sum() > 0


def test_points_conflicting_with_the_spec_win_and_are_noted(small):
    case, net = small
    w = wrap_model(net(), spec=CrossSectionSpec(points=12, size=7, pixel_mm=0.6))
    e = explain_case(w, case, target=1, methods=["gradient"], points=8)
    assert e.settings["points"] == 8 and e.sections.values.shape[1] == 8
    note = next(n for n in e.notes if n.startswith("sampling: "))
    assert "--points (points) 8 conflicts with the model's spec (12)" in note
    assert "the value you gave wins" in note
    assert w.spec.points == 12  # the caller's wrapped model is left as it was


def test_gradcam_layer_option_and_derived_geometry_are_recorded(small):
    case, _ = small
    import torch

    class Conv(torch.nn.Module):
        def __init__(self):
            super().__init__()
            self.a = torch.nn.Conv3d(1, 2, 3, padding=1)
            self.b = torch.nn.Conv3d(2, 2, 3, stride=2, padding=1)

        def forward(self, x):
            bs = x.shape[0] * x.shape[1]
            z = self.b(torch.tanh(self.a(x.reshape(bs, 1, *x.shape[2:]) / 300.0)))
            return z.mean(dim=(2, 3, 4)).reshape(*x.shape[:2], -1).amax(dim=1)

    e = explain_case(wrap_model(Conv()), case, target=0, methods=["gradcam"], gradcam_layer="a",
                     **SAMPLING)
    options = e.settings["method_options"]["gradcam"]
    # Dumoulin & Visin 2016: a 3x3x3 convolution of stride 1 and padding 1 keeps cell j at j
    assert options["layer"] == "a" and options["geometry_from"] == "layers"
    assert options["layer_stride"] == [1.0, 1.0, 1.0] and options["layer_offset"] == [0, 0, 0]
    with pytest.raises(Exception, match="gradcam is not among the methods"):
        explain_case(wrap_model(Conv()), case, target=0, methods=["gradient"],
                     gradcam_layer="a", **SAMPLING)
