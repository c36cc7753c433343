"""The saliency methods' defaults and batch sizes, each against an outside reference.

References: captum 0.9 ``NoiseTunnel`` around ``Saliency`` (Smilkov et al. 2017, SmoothGrad),
captum ``IntegratedGradients`` (Sundararajan, Taly and Yan 2017) and captum ``Occlusion``
(Zeiler and Fergus 2014), run directly on the torch module with the settings written out.
The batch sizes of the model calls are counted with a torch forward pre-hook.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest
import torch
from captum.attr import IntegratedGradients, NoiseTunnel, Occlusion, Saliency

from explain import InputError
from explain.attribution import attribute
from explain.model import wrap_model

_h = importlib.util.spec_from_file_location("h", Path(__file__).with_name("helpers.py"))
h = importlib.util.module_from_spec(_h)
_h.loader.exec_module(h)


def _batches(net):
    """Segments per encoder call of ``net`` (SmallConv encodes B x S segments at once)."""
    seen = []
    net.conv.register_forward_pre_hook(lambda mod, args: seen.append(args[0].shape[0]))
    return seen


def test_smoothgrad_defaults_are_50_samples_and_015_of_the_range():
    # Smilkov et al. 2017 use noise of 10-20 % of the input range and about 50 samples; captum
    # NoiseTunnel with those settings written out is the reference.
    net = h.tm.SmallConv()
    x = h.patient(s=2, n=2, h=4, w=4, seed=7)
    ours = attribute(wrap_model(net), x, method="smoothgrad", target=1)
    torch.manual_seed(0)
    ref = NoiseTunnel(Saliency(net)).attribute(
        x.clone(), nt_type="smoothgrad", nt_samples=50, stdevs=0.15 * float(x.max() - x.min()),
        target=1, nt_samples_batch_size=8, abs=False)
    torch.testing.assert_close(ours, ref, rtol=1e-5, atol=1e-6)


def test_smoothgrad_one_sample_is_allowed_and_zero_noise_is_the_gradient():
    # With noise 0 every sample is x itself: SmoothGrad is the plain gradient (captum Saliency).
    net = h.tm.SmallConv()
    x = h.patient(s=2, n=2, h=4, w=4, seed=8)
    ours = attribute(wrap_model(net), x, method="smoothgrad", target=2, n=1, noise=0.0)
    ref = Saliency(net).attribute(x.clone().requires_grad_(True), target=2, abs=False)
    torch.testing.assert_close(ours, ref, rtol=1e-5, atol=1e-7)


@pytest.mark.parametrize("range_hu, message", [
    ("wide", "expected (min, max) in HU, got 'wide'"),
    ((1.0, 2.0, 3.0), "expected (min, max) in HU, got (1.0, 2.0, 3.0)"),
    ((300.0, -200.0), "expected finite min <= max in HU, got (300.0, -200.0)"),
    ((0.0, float("nan")), "expected finite min <= max in HU"),
])
def test_smoothgrad_bad_range_says_what_came(range_hu, message):
    wrapped = wrap_model(h.tm.SmallConv())
    with pytest.raises(InputError, match="smoothgrad range_hu: " + message.replace("(", r"\(")
                       .replace(")", r"\)").replace(".", r"\.")):
        attribute(wrapped, h.patient(s=2), method="smoothgrad", target=0, n=2, range_hu=range_hu)


def test_smoothgrad_empty_range_is_no_noise():
    # range_hu (v, v): sd 0, so the map is the gradient (captum Saliency).
    net = h.tm.SmallConv()
    x = h.patient(s=2, n=2, h=4, w=4, seed=9)
    ours = attribute(wrap_model(net), x, method="smoothgrad", target=0, n=3, range_hu=(5.0, 5.0))
    ref = Saliency(net).attribute(x.clone().requires_grad_(True), target=0, abs=False)
    torch.testing.assert_close(ours, ref, rtol=1e-5, atol=1e-7)


def test_smoothgrad_runs_8_noisy_patients_per_call_by_default():
    # 20 samples of a 2-segment patient in calls of 8, 8, 4 patients (the documented default).
    net = h.tm.SmallConv()
    seen = _batches(net)
    attribute(wrap_model(net), h.patient(s=2, n=2, h=4, w=4), method="smoothgrad", target=0, n=20)
    assert sorted(set(seen[-3:]), reverse=True) == [16, 8]
    assert max(seen) == 8 * 2


def test_integrated_gradients_default_batch_is_8_steps():
    net = h.tm.SmallConv()
    seen = _batches(net)
    attribute(wrap_model(net), h.patient(s=2, n=2, h=4, w=4), method="integrated_gradients",
              target=0, steps=20)
    assert max(seen) == 8 * 2


def test_integrated_gradients_baseline_is_the_constant_baseline_hu():
    # captum IntegratedGradients from the constant -1000 HU patient, 50 Gauss-Legendre steps.
    net = h.tm.SmallConv()
    x = h.patient(s=2, n=2, h=4, w=4, seed=4)
    ours, delta = attribute(wrap_model(net), x, method="integrated_gradients", target=3,
                            baseline_hu=-1000.0, return_convergence_delta=True)
    ref, ref_delta = IntegratedGradients(net).attribute(
        x.clone(), baselines=-1000.0, target=3, n_steps=50, method="gausslegendre",
        return_convergence_delta=True)
    torch.testing.assert_close(ours, ref.float(), rtol=1e-4, atol=1e-6)
    torch.testing.assert_close(delta, ref_delta, rtol=1e-3, atol=1e-5)


def test_occlusion_default_window_is_4_sections_by_8_pixels_with_stride_the_window():
    # captum Occlusion on the whole model, one segment's window (1, 4, 8, 8), fill 0 HU.
    net = h.tm.SmallConv()
    x = h.patient(s=2, n=8, h=8, w=8, seed=2)
    ours = attribute(wrap_model(net), x, method="occlusion", target=1)
    ref = Occlusion(net).attribute(x.clone(), sliding_window_shapes=(1, 4, 8, 8),
                                   strides=(1, 4, 8, 8), baselines=0.0, target=1)
    torch.testing.assert_close(ours, ref.float(), rtol=1e-5, atol=1e-6)


def test_occlusion_default_batch_is_16_windows():
    net = h.tm.SmallConv()
    seen = _batches(net)
    attribute(wrap_model(net), h.patient(s=1, n=8, h=8, w=8), method="occlusion", target=1,
              window=(1, 2, 2))
    # 8 x 4 x 4 = 128 windows of one segment, 16 per encoder call (one segment each)
    assert max(seen) == 16


def test_integrated_gradients_called_directly_starts_from_0_hu_and_allows_one_step():
    # captum IntegratedGradients, baseline 0 HU; one Gauss-Legendre node is the midpoint rule
    from explain.attribution._common import fixed_target
    from explain.attribution.integrated import integrated_gradients

    net = h.tm.SmallConv()
    wrapped = wrap_model(net)
    x = h.patient(s=2, n=2, h=4, w=4, seed=6)
    tgt = fixed_target(wrapped, x, 2)
    for steps in (50, 1):
        ours = integrated_gradients(wrapped, x, tgt) if steps == 50 else \
            integrated_gradients(wrapped, x, tgt, steps=1)
        ref = IntegratedGradients(net).attribute(x.clone(), baselines=0.0, target=2, n_steps=steps,
                                                 method="gausslegendre")
        torch.testing.assert_close(ours, ref, rtol=1e-4, atol=1e-6)
    with pytest.raises(InputError, match="integrated_gradients steps: expected a positive integer"):
        integrated_gradients(wrapped, x, tgt, steps=0)
