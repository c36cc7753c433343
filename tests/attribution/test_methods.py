"""Saliency maps against captum run on the whole model (tolerance 1e-5), and published checks."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest
import torch
from captum.attr import (
    InputXGradient,
    IntegratedGradients,
    LayerAttribution,
    LayerGradCam,
    NoiseTunnel,
    Occlusion,
    Saliency,
)

from explain.attribution import METHODS, attribute
from explain.attribution.gradcam import upsample_at_centres
from explain.errors import InputError
from explain.model import wrap_model

_h = importlib.util.spec_from_file_location("h", Path(__file__).with_name("helpers.py"))
h = importlib.util.module_from_spec(_h)
_h.loader.exec_module(h)

TOL = dict(rtol=1e-5, atol=1e-5)


def _grade(net):
    return lambda x: net(x)["grade"]


@pytest.fixture(params=["protocol", "plain"])
def case(request):
    """(wrapped, whole-model forward for captum, x, target index)."""
    x = h.patient(s=3, seed=11)
    if request.param == "protocol":
        net = h.tm.SmallConv()
        return wrap_model(net), net, x, 2, "conv2", net.conv2
    net = h.tm.PlainConv("max")
    return wrap_model(net), _grade(net), x, 2, "inner.conv2", net.inner.conv2


def _target(case):
    w, forward, x, k, *_ = case
    return k if w.kind == "protocol" else f"grade:{k}"


def test_gradient_equals_captum_saliency(case):
    w, forward, x, k, *_ = case
    ours = attribute(w, x, method="gradient", target=_target(case))
    ref = Saliency(forward).attribute(x.clone().requires_grad_(), target=k, abs=False)
    torch.testing.assert_close(ours, ref, **TOL)


def test_gradient_x_input_equals_captum(case):
    w, forward, x, k, *_ = case
    ours = attribute(w, x, method="gradient_x_input", target=_target(case))
    ref = InputXGradient(forward).attribute(x.clone().requires_grad_(), target=k)
    torch.testing.assert_close(ours, ref, **TOL)


def test_integrated_gradients_equal_captum_and_complete(case):
    w, forward, x, k, *_ = case
    ours, delta = attribute(
        w, x, method="integrated_gradients", target=_target(case), baseline_hu=-50.0,
        steps=64, return_convergence_delta=True,
    )
    ref = IntegratedGradients(forward).attribute(x.clone(), baselines=-50.0, target=k, n_steps=64)
    torch.testing.assert_close(ours, ref, **TOL)
    # completeness (Sundararajan, Taly, Yan 2017): sum = F(x) - F(baseline)
    with torch.no_grad():
        gap = float(forward(x)[0, k] - forward(torch.full_like(x, -50.0))[0, k])
    assert float(ours.sum()) == pytest.approx(gap, rel=2e-2, abs=1e-4)
    assert float(delta[0]) == pytest.approx(float(ours.double().sum()) - gap, abs=1e-4)


def test_smoothgrad_equals_captum_noise_tunnel(case):
    w, forward, x, k, *_ = case
    ours = attribute(w, x, method="smoothgrad", target=_target(case), n=6, noise=0.1, seed=3)
    sd = 0.1 * float(x.max() - x.min())
    torch.manual_seed(3)
    ref = NoiseTunnel(Saliency(forward)).attribute(
        x.clone(), nt_type="smoothgrad", nt_samples=6, stdevs=sd, target=k, abs=False,
        nt_samples_batch_size=8,
    )
    torch.testing.assert_close(ours, ref, **TOL)


def _resize_geometry(shape_in, shape_layer):
    """Cell centres of a plain resize (interpolate, align_corners=False): stride = in / layer,
    offset = (stride - 1) / 2. Given explicitly, because without it the layers' own geometry is
    used (test_gradcam_geometry.py), which captum's interpolate does not model."""
    stride = [a / b for a, b in zip(shape_in, shape_layer)]
    return {"layer_stride": stride, "layer_offset": [(st - 1) / 2 for st in stride]}


def test_gradcam_equals_captum_layer_gradcam_interpolated(case):
    w, forward, x, k, layer_name, layer = case
    cam = LayerGradCam(forward, layer).attribute(x.clone(), target=k, relu_attributions=True)
    ours = attribute(w, x, method="gradcam", target=_target(case), layer=layer_name,
                     **_resize_geometry(x.shape[2:], cam.shape[2:]))
    ref = LayerAttribution.interpolate(cam, tuple(x.shape[2:]), interpolate_mode="trilinear")
    torch.testing.assert_close(ours, ref.reshape(x.shape), **TOL)


def test_occlusion_equals_captum_occlusion_on_whole_model(case):
    w, forward, x, k, *_ = case
    ours = attribute(
        w, x, method="occlusion", target=_target(case), window=(2, 3, 3), stride=(1, 2, 2),
        baseline_hu=-30.0, internal_batch_size=5,
    )
    ref = Occlusion(forward).attribute(
        x.clone(), sliding_window_shapes=(1, 2, 3, 3), strides=(1, 1, 2, 2), baselines=-30.0,
        target=k, perturbations_per_eval=7,
    )
    torch.testing.assert_close(ours, ref, **TOL)


def test_expected_target_matches_captum_with_same_function():
    net = h.tm.SmallConv()
    w = wrap_model(net, grade_labels=("0", "1", "2", "3"))
    x = h.patient(s=3, seed=2)

    def expected(z):  # sum of softmax probability x category rank
        return (torch.softmax(net(z), dim=1) * torch.arange(4.0)).sum(dim=1)

    ours = attribute(w, x, method="gradient", target="expected")
    torch.testing.assert_close(ours, Saliency(expected).attribute(x.clone().requires_grad_(), abs=False), **TOL)


def test_darkest_lumen_known_location():
    # known answer: F = -(darkest central value) over all segments; dF/dx = -1 at that pixel only
    w = wrap_model(h.tm.DarkestLumen())
    x = torch.full((1, 3, 4, 4, 4), 350.0)
    x[0, 1, 2, 1, 2] = 40.0
    x[0, 2, 0, 2, 1] = 90.0
    grad = attribute(w, x, method="gradient", target=0)
    want = torch.zeros_like(x)
    want[0, 1, 2, 1, 2] = -1.0
    torch.testing.assert_close(grad, want)
    occ = attribute(w, x, method="occlusion", target=0, window=(1, 1, 1), baseline_hu=350.0)
    # filling the darkest pixel with 350 HU leaves segment 2's 90 HU as darkest: drop 50
    assert float(occ[0, 1, 2, 1, 2]) == pytest.approx(-40.0 + 90.0)
    assert int(occ.abs().flatten().argmax()) == int(want.abs().flatten().argmax())


def test_upsample_honours_stride_and_offset():
    # cell j centred on pixel offset + stride * j: values are exact there, linear between
    coarse = torch.tensor([[1.0, 3.0], [5.0, 7.0]])
    up = upsample_at_centres(coarse, (4, 4), stride=2, offset=0)
    assert float(up[0, 0]) == 1.0 and float(up[2, 2]) == 7.0 and float(up[0, 2]) == 3.0
    assert float(up[1, 1]) == pytest.approx(4.0) and float(up[3, 3]) == 7.0
    # default centres = torch.nn.functional.interpolate(align_corners=False), as captum uses
    grid = torch.arange(12.0).reshape(3, 4)
    ref = torch.nn.functional.interpolate(grid[None, None], size=(7, 9), mode="bilinear")[0, 0]
    torch.testing.assert_close(upsample_at_centres(grid, (7, 9)).float(), ref)


def test_unknown_method_and_option():
    w = wrap_model(h.tm.SmallConv())
    x = h.patient(s=2)
    with pytest.raises(InputError, match="expected one of"):
        attribute(w, x, method="lime", target=0)
    with pytest.raises(InputError, match="unknown option"):
        attribute(w, x, method="gradient", target=0, steps=3)
    with pytest.raises(InputError, match="window"):
        attribute(w, x, method="occlusion", target=0, window=(9, 1, 1))
    assert set(METHODS) == {
        "gradient", "gradient_x_input", "smoothgrad", "integrated_gradients", "gradcam", "occlusion"
    }
    assert np.isfinite(attribute(w, x, method="gradcam", target=0, layer="conv").numpy()).all()


def test_gradcam_2d_layer_per_cross_section_equals_captum():
    # captum LayerGradCam on the whole model, then LayerAttribution.interpolate (bilinear)
    net = h.tm.PerSection2D()
    w = wrap_model(net)
    x = h.patient(s=3, n=4, h=6, w=6, seed=8)
    cam = LayerGradCam(net, net.conv).attribute(x.clone(), target=1, relu_attributions=True)
    ours = attribute(w, x, method="gradcam", target=1, layer="conv",
                     **_resize_geometry((6, 6), cam.shape[2:]))
    ref = LayerAttribution.interpolate(cam, (6, 6), interpolate_mode="bilinear")
    torch.testing.assert_close(ours, ref.reshape(x.shape), **TOL)


def test_gradcam_default_layer_is_the_last_convolution():
    w = wrap_model(h.tm.SmallConv())
    x = h.patient(s=2, seed=5)
    torch.testing.assert_close(
        attribute(w, x, method="gradcam", target=0),
        attribute(w, x, method="gradcam", target=0, layer="conv2"),
    )
    with pytest.raises(InputError, match="no Conv2d/Conv3d"):
        attribute(wrap_model(h.tm.DarkestLumen()), x, method="gradcam", target=0)
    with pytest.raises(InputError, match="no such submodule"):
        attribute(w, x, method="gradcam", target=0, layer="conv9")
