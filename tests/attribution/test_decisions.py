"""Tests that pin the library's attribution decisions, each against an independent computation.

Each test fails when its decision changes: the culprit rule (Shapley, not leave-one-out), the
Integrated Gradients step count (50) and quadrature, the occlusion fill (``baseline_hu``) and the
Grad-CAM cell geometry of the reference network.
"""

from __future__ import annotations

import importlib.util
import itertools
import math
from pathlib import Path

import numpy as np
import pytest
import torch

from explain.attribution import attribute, trace_segments
from explain.attribution.trace import culprit_doubts
from explain.model import load_model, wrap_model
from explain.report.explanation import method_settings

_h = importlib.util.spec_from_file_location("h", Path(__file__).with_name("helpers.py"))
h = importlib.util.module_from_spec(_h)
_h.loader.exec_module(h)


class SectionMeans(torch.nn.Module):
    """Protocol model: feature c of a segment = mean HU of its cross-section c / 100; head = sum.

    With a 0 HU baseline, v(T) = sum over channels of the largest feature in T (or 0): a sum of
    "airport games", whose Shapley values are known in closed form.
    """

    def encode_segments(self, x):
        return x[:, :, :2].mean(dim=(3, 4)) / 100.0  # (B, S, 2)

    def head(self, pooled):
        return pooled.sum(dim=1, keepdim=True)

    def forward(self, x):
        return self.head(self.encode_segments(x).max(dim=1).values)


def _redundant_patient():
    """Segments 0 and 1 both raise channel 0 (to 10 and 8); segment 2 alone raises channel 1 (5)."""
    x = torch.zeros(1, 3, 2, 4, 4)
    x[0, 0, 0] = 1000.0
    x[0, 1, 0] = 800.0
    x[0, 2, 1] = 500.0
    return x


def test_culprit_is_the_largest_shapley_value_not_leave_one_out():
    # By hand (Shapley 1953; the two-player airport game of Littlechild and Owen 1973):
    # channel 0 is max(10, 8) shared by segments 0 and 1: phi_1 = 8 / 2 = 4, phi_0 = 4 + 2 = 6;
    # channel 1 belongs to segment 2 alone: phi_2 = 5. Leave-one-out: v(all) = 15,
    # v(-0) = 8 + 5, v(-1) = 10 + 5, v(-2) = 10, so LOO = (2, 0, 5): it would blame segment 2.
    tr = trace_segments(wrap_model(SectionMeans()), _redundant_patient(), target=0)
    np.testing.assert_allclose(tr.shapley, [6.0, 4.0, 5.0], atol=1e-5)
    np.testing.assert_allclose(tr.leave_one_out, [2.0, 0.0, 5.0], atol=1e-5)
    assert int(np.argmax(tr.leave_one_out)) == 2
    assert tr.culprit == 0
    assert tr.margin == pytest.approx(6.0 - 5.0, abs=1e-5)  # culprit minus runner-up, exactly 1
    assert tr.value_all == pytest.approx(15.0, abs=1e-5)
    assert tr.value_empty == pytest.approx(0.0, abs=1e-9)
    # gradient x feature (d head / d pooled = 1): each channel's value goes to its winner
    np.testing.assert_allclose(tr.gradient_x_feature, [10.0, 0.0, 5.0], atol=1e-5)
    assert tr.winners.tolist() == [0, 2]


def test_culprit_tie_and_single_segment_margin():
    # Two identical segments share the Shapley value (symmetry, Shapley 1953); the first index
    # wins the tie (documented), and a single segment's margin is its own value.
    x = torch.zeros(1, 2, 2, 4, 4)
    x[0, :, 0] = 300.0
    tr = trace_segments(wrap_model(SectionMeans()), x, target=0)
    np.testing.assert_allclose(tr.shapley, [1.5, 1.5], atol=1e-6)
    assert tr.culprit == 0 and tr.margin == pytest.approx(0.0, abs=1e-6)
    one = trace_segments(wrap_model(SectionMeans()), x[:, :1], target=0)
    assert one.culprit == 0 and one.margin == pytest.approx(3.0, abs=1e-6)


def test_low_margin_rule_is_a_tenth_of_the_total_change():
    # the rule as documented: margin < 0.10 |v(all) - v(none)|; at exactly a tenth it is not low
    assert culprit_doubts([0.6, 0.5], 0.1, 1.0, 0.0) == ()
    assert culprit_doubts([0.6, 0.5], 0.0999, 1.0, 0.0) == ("low_margin",)
    assert culprit_doubts([0.6, 0.5], 0.0999, 0.0, 1.0) == ("low_margin",)  # |.|, not signed
    assert culprit_doubts([0.0, -1.0], 1.0, -1.0, 0.0) == ("no_positive_segment",)
    assert culprit_doubts([1e-12, -1.0], 1.0, -1.0, 0.0) == ()


def _gauss_legendre_ig(forward, x, baseline, n):
    """IG by an n-node Gauss-Legendre rule on [0, 1] (Sundararajan, Taly, Yan 2017, eq. 1),
    with the nodes and weights of numpy.polynomial.legendre.leggauss, and torch autograd."""
    nodes, weights = np.polynomial.legendre.leggauss(n)
    alphas = torch.as_tensor(0.5 * (nodes + 1.0), dtype=x.dtype).reshape(-1, 1, 1, 1, 1)
    points = (baseline + alphas * (x - baseline)).requires_grad_(True)  # all n points at once
    (grads,) = torch.autograd.grad(forward(points).sum(), points)
    weights = torch.as_tensor(0.5 * weights, dtype=torch.float64).reshape(-1, 1, 1, 1, 1)
    total = (weights * grads.double()).sum(dim=0, keepdim=True)
    return (total * (x - baseline).double()).float()


def test_integrated_gradients_default_is_50_gauss_legendre_steps():
    net = h.tm.SmallConv()
    w = wrap_model(net)
    x = h.patient(s=2, n=3, h=4, w=4, seed=2, scale=300.0)

    def forward(inp):
        return net(inp)[:, 1]

    ours = attribute(w, x, method="integrated_gradients", target=1, baseline_hu=-100.0,
                     internal_batch_size=50)
    want = _gauss_legendre_ig(forward, x, -100.0, 50)
    torch.testing.assert_close(ours, want, rtol=1e-4, atol=1e-6)
    # the rule is sensitive to the step count on this model: 2 nodes give another map
    assert float((_gauss_legendre_ig(forward, x, -100.0, 2) - want).abs().max()) > 1e-3
    # explain_case runs it with the same 50 steps, and says so in the settings
    assert method_settings("integrated_gradients", (3, 4, 4), seed=0) == {"steps": 50}


def test_integrated_gradients_completeness_delta_by_hand():
    # completeness (Sundararajan, Taly, Yan 2017): sum of attributions = F(x) - F(baseline);
    # captum's delta is sum - (F(x) - F(baseline)). A linear model makes the rule exact.
    class Linear(torch.nn.Module):
        def encode_segments(self, x):
            return x.sum(dim=(2, 3, 4))[..., None] * 0.01

        def head(self, pooled):
            return 3.0 * pooled

        def forward(self, x):
            return self.head(self.encode_segments(x).max(dim=1).values)

    x = torch.zeros(1, 2, 2, 2, 2)
    x[0, 0] = 100.0  # segment 0 wins: F(x) = 3 * 0.01 * 800 = 24
    ig, delta = attribute(wrap_model(Linear()), x, method="integrated_gradients", target=0,
                          baseline_hu=0.0, return_convergence_delta=True)
    assert float(ig.sum()) == pytest.approx(24.0, rel=1e-5)
    torch.testing.assert_close(ig[0, 0], torch.full((2, 2, 2), 3.0))  # 3 * 0.01 * 100 per voxel
    assert float(ig[0, 1].abs().max()) == 0.0
    assert abs(float(delta[0])) < 1e-4


def _occlusion_by_hand(forward, x, window, stride, fill):
    """Zeiler and Fergus 2014 on one patient: each window of each segment filled with ``fill``;
    each pixel gets the mean drop of the target over the windows that cover it (captum's
    averaging), written as plain loops over window positions."""
    _, s_count, n, hh, ww = x.shape
    with torch.no_grad():
        full = float(forward(x)[0])
        total = torch.zeros_like(x, dtype=torch.float64)
        count = torch.zeros_like(x, dtype=torch.float64)
        starts = [range(0, size - win + 1, st) for size, win, st in zip((n, hh, ww), window, stride)]
        for s in range(s_count):
            for a, b, c in itertools.product(*starts):
                sl = (0, s, slice(a, a + window[0]), slice(b, b + window[1]), slice(c, c + window[2]))
                xo = x.clone()
                xo[sl] = fill
                total[sl] += full - float(forward(xo)[0])
                count[sl] += 1
    return (total / count.clamp_min(1)).float()


def test_occlusion_fills_with_baseline_hu():
    net = h.tm.SmallConv()
    x = h.patient(s=2, n=4, h=4, w=4, seed=4)
    ours = attribute(wrap_model(net), x, method="occlusion", target=3, window=(2, 2, 2),
                     stride=(1, 2, 2), baseline_hu=-120.0)
    want = _occlusion_by_hand(lambda inp: net(inp)[:, 3], x, (2, 2, 2), (1, 2, 2), -120.0)
    torch.testing.assert_close(ours, want, rtol=1e-4, atol=1e-5)
    zero_fill = _occlusion_by_hand(lambda inp: net(inp)[:, 3], x, (2, 2, 2), (1, 2, 2), 0.0)
    assert float((zero_fill - want).abs().max()) > 1e-3  # the fill matters on this model


def _centre_of_receptive_field(net, cell):
    """Input pixel at the centre of the support of d a[cell] / d input, by autograd."""
    x = torch.zeros((1, 2) + tuple(net.cross_section_spec.shape), requires_grad=True)
    a = net.features[:3](x)  # up to the second 3D convolution, before its ReLU
    (grad,) = torch.autograd.grad(a[(0, 0) + cell], x)
    support = np.argwhere(grad[0].abs().sum(dim=0).numpy() > 0)
    return (support.min(axis=0) + support.max(axis=0)) / 2.0


@pytest.fixture(scope="module")
def reference():
    return load_model("builtin:reference")


def test_reference_gradcam_cell_centres_by_hand(reference):
    # Receptive-field centre of stacked convolutions (Araujo, Norris, Sim, "Computing receptive
    # fields of convolutional neural networks", Distill 2019): for one layer of kernel k,
    # padding p and stride s, output j is centred on input s * j - p + (k - 1) / 2. Layer 1
    # (k 3, p 1, s 1): centre j. Layer 2 (k 3, p 1, s 1 along the segment and 2 in the plane):
    # centre 1 * n and 2 * j - 1 + 1 = 2 j. So stride (1, 2, 2), offset (0, 0, 0).
    net = reference.module
    layers = [net.features[0], net.features[2]]
    stride, offset = np.ones(3), np.zeros(3)
    for conv in layers:
        k, p, s = (np.asarray(v, dtype=float) for v in (conv.kernel_size, conv.padding, conv.stride))
        offset = offset + stride * (-p + (k - 1) / 2)
        stride = stride * s
    assert net.cam_layer == "features.2"
    np.testing.assert_array_equal(stride, [1.0, 2.0, 2.0])
    np.testing.assert_array_equal(offset, [0.0, 0.0, 0.0])
    assert tuple(net.cam_stride) == tuple(stride) and tuple(net.cam_offset) == tuple(offset)
    # the same centres, measured: the support of the gradient of interior cells, by autograd
    for cell in [(5, 3, 4), (10, 6, 2)]:
        np.testing.assert_array_equal(_centre_of_receptive_field(net, cell),
                                      offset + stride * np.asarray(cell))


def test_reference_gradcam_map_equals_the_cell_value_at_its_centre(reference):
    # Grad-CAM (Selvaraju et al. 2017): w_k = mean over the grid of d y / d A_k,
    # map = ReLU(sum_k w_k A_k), computed here with a hook on the whole model; at the input pixel
    # of a cell's centre the interpolated map must equal that cell's value.
    net = reference.module
    x = torch.full((1, 2) + tuple(net.cross_section_spec.shape), -80.0)
    x[:, :, :, 8:16, 8:16] = 350.0
    x[0, 1, 10:14, 9:15, 9:15] = 60.0
    saved = {}
    hook = net.features[2].register_forward_hook(lambda m, i, o: saved.update(a=o))
    try:
        out = net(x)
    finally:
        hook.remove()
    y = (torch.softmax(out, dim=1) * torch.arange(7.0)).sum()  # expected category, ranks 0..6
    (grad,) = torch.autograd.grad(y, saved["a"])
    a, g = saved["a"].detach(), grad
    cam = torch.relu((g.mean(dim=(2, 3, 4), keepdim=True) * a).sum(dim=1))  # (S, N, h, w)
    ours = attribute(reference, x, method="gradcam", target="expected")[0]
    n, hh, ww = cam.shape[1:]
    centres = ours[:, :, 0 : 2 * hh : 2, 0 : 2 * ww : 2]
    torch.testing.assert_close(centres, cam.float(), rtol=1e-4, atol=1e-6)
    assert float(cam.max()) > 0  # the check is not about an all-zero map
    assert math.isclose(float(ours.max()), float(cam.max()), rel_tol=1e-4)


def test_sampled_shapley_is_the_mean_over_the_seeded_orders():
    # Permutation sampling (Castro, Gomez, Tejada 2009): the mean marginal gain over orders
    # drawn one after another from numpy's default_rng(seed).permutation, written here as a
    # plain loop on v(T) = sum over channels of the largest feature in T (0 HU baseline).
    x = _redundant_patient()
    feats = np.array([[10.0, 0.0], [8.0, 0.0], [0.0, 5.0]])

    def v(members):
        return float(np.max(np.vstack([np.zeros(2), feats[list(members)]]), axis=0).sum())

    rng = np.random.default_rng(3)
    gains = np.zeros((7, 3))
    for p in range(7):
        order = rng.permutation(3)
        for j, s in enumerate(order):
            gains[p, s] = v(order[: j + 1]) - v(order[:j])
    tr = trace_segments(wrap_model(SectionMeans()), x, target=0, max_exact=2, n_permutations=7,
                        seed=3, internal_batch_size=8)  # 2 orders per head call: 2 + 2 + 2 + 1
    np.testing.assert_allclose(tr.shapley, gains.mean(axis=0), atol=1e-5)
    np.testing.assert_allclose(tr.shapley_stderr, gains.std(axis=0, ddof=1) / math.sqrt(7),
                               atol=1e-5)
    assert tr.shapley.sum() == pytest.approx(15.0, abs=1e-4)  # every order sums to v(all)


def test_low_margin_uses_the_difference_of_all_and_none():
    # |v(all) - v(none)| = 0.5 here, so a margin of 0.06 is not low (0.06 >= 0.05)
    assert culprit_doubts([0.3, 0.24], 0.06, 1.0, 0.5) == ()
    assert culprit_doubts([0.3, 0.26], 0.04, 1.0, 0.5) == ("low_margin",)
