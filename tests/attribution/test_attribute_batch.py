"""``attribute`` over several patients: each is its own explanation, as captum on each alone.

References: captum 0.9 ``Saliency`` and ``IntegratedGradients`` (Sundararajan, Taly and Yan 2017)
run on one patient at a time with that patient's predicted class written out.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest
import torch
from captum.attr import IntegratedGradients, Saliency

from explain import InputError
from explain.attribution import attribute
from explain.model import wrap_model

_h = importlib.util.spec_from_file_location("h", Path(__file__).with_name("helpers.py"))
h = importlib.util.module_from_spec(_h)
_h.loader.exec_module(h)


def _two_patients(net):
    """Two patients whose predicted classes differ (searched over seeds, checked)."""
    for seed in range(50):
        x = torch.cat([h.patient(s=2, n=2, h=4, w=4, seed=seed),
                       h.patient(s=2, n=2, h=4, w=4, seed=seed + 100)])
        with torch.no_grad():
            pred = net(x).argmax(dim=1)
        if pred[0] != pred[1]:
            return x, [int(p) for p in pred]
    raise RuntimeError("no two patients with different predictions")


def test_predicted_target_is_fixed_per_patient():
    net = h.tm.SmallConv()
    x, pred = _two_patients(net)
    ours = attribute(wrap_model(net), x, method="gradient", target="predicted")
    assert ours.shape == x.shape and ours.dtype == torch.float32
    for b in range(2):
        ref = Saliency(net).attribute(x[b : b + 1].clone().requires_grad_(True), target=pred[b],
                                      abs=False)
        torch.testing.assert_close(ours[b : b + 1], ref, rtol=1e-5, atol=1e-7)


def test_integrated_gradients_deltas_one_per_patient():
    net = h.tm.SmallConv()
    x, pred = _two_patients(net)
    ours, delta = attribute(wrap_model(net), x, method="integrated_gradients", target="predicted",
                            steps=8, return_convergence_delta=True, baseline_hu=-50.0)
    assert delta.shape == (2,)
    for b in range(2):
        ref, ref_delta = IntegratedGradients(net).attribute(
            x[b : b + 1].clone(), baselines=-50.0, target=pred[b], n_steps=8,
            method="gausslegendre", return_convergence_delta=True)
        torch.testing.assert_close(ours[b : b + 1], ref.float(), rtol=1e-4, atol=1e-6)
        torch.testing.assert_close(delta[b : b + 1], ref_delta, rtol=1e-3, atol=1e-5)


def test_rotations_take_one_patient():
    net = h.tm.SmallConv()
    x, _ = _two_patients(net)
    with pytest.raises(InputError, match=r"^rotations: average one patient at a time \(B = 1\)$"):
        attribute(wrap_model(net), x, method="gradient", target=0, rotations=2,
                  resample=lambda a: x[:1])


def test_float64_input_gives_a_float32_map():
    net = h.tm.SmallConv()
    x = h.patient(s=2, n=2, h=4, w=4, seed=3)
    ours = attribute(wrap_model(net), x.double(), method="gradient_x_input", target=1)
    ref = Saliency(net).attribute(x.clone().requires_grad_(True), target=1, abs=False) * x
    assert ours.dtype == torch.float32
    torch.testing.assert_close(ours, ref, rtol=1e-5, atol=1e-6)


@pytest.mark.parametrize("method", ["gradient", "occlusion"])
def test_a_single_segment_patient_is_the_whole_model(method):
    # no other segment to hold fixed: the segment-local function is the model itself
    # (captum Saliency, and captum Occlusion with a (1, 2, 2, 2) window, on the whole model)
    from captum.attr import Occlusion

    net = h.tm.SmallConv()
    x = h.patient(s=1, n=4, h=4, w=4, seed=12)
    if method == "gradient":
        ours = attribute(wrap_model(net), x, method="gradient", target=3)
        ref = Saliency(net).attribute(x.clone().requires_grad_(True), target=3, abs=False)
    else:
        ours = attribute(wrap_model(net), x, method="occlusion", target=3, window=(2, 2, 2),
                         baseline_hu=20.0)
        ref = Occlusion(net).attribute(x.clone(), sliding_window_shapes=(1, 2, 2, 2),
                                       strides=(1, 2, 2, 2), baselines=20.0, target=3)
    torch.testing.assert_close(ours, ref.float(), rtol=1e-5, atol=1e-6)


def test_segment_local_function_names_its_segment_and_model():
    from explain.attribution.local import SegmentLocal

    w = wrap_model(h.tm.SmallConv(), name="tiny")
    f = SegmentLocal(w, h.patient(s=3, n=2, h=4, w=4), lambda out: out[:, 0], 2)
    assert repr(f) == "SegmentLocal(segment=2, model='tiny')"
