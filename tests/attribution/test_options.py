"""Options of the attribution methods: what each bad value is told, and the defaults a report
records. Hand-written expectations on tiny models (captum's basic-model style)."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest
import torch

from explain.attribution import attribute, trace_segments
from explain.attribution.gradcam import LayerNotUsable, upsample_at_centres
from explain.attribution.occlusion import occlusion
from explain.errors import InputError
from explain.model import wrap_model

_h = importlib.util.spec_from_file_location("h", Path(__file__).with_name("helpers.py"))
h = importlib.util.module_from_spec(_h)
_h.loader.exec_module(h)


@pytest.fixture(scope="module")
def small():
    return wrap_model(h.tm.SmallConv()), h.patient(s=2, n=4, h=4, w=4, seed=1)


@pytest.mark.parametrize("method, options, message", [
    ("integrated_gradients", {"steps": 0}, r"integrated_gradients steps: expected a positive integer, got 0"),
    ("integrated_gradients", {"steps": True}, r"steps: expected a positive integer, got True"),
    ("smoothgrad", {"n": 0}, r"smoothgrad n: expected a positive number of samples, got 0"),
    ("smoothgrad", {"noise": -0.1}, r"smoothgrad noise: expected a fraction of the HU range >= 0, got -0.1"),
    ("smoothgrad", {"noise": float("nan")}, r"smoothgrad noise"),
    ("occlusion", {"window": (0, 1, 1)}, r"occlusion window: expected 3 positive integers \(cross-sections, pixels, pixels\), got \(0, 1, 1\)"),
    ("occlusion", {"window": (1, 1)}, r"occlusion window: expected 3 positive integers"),
    ("occlusion", {"window": "abc"}, r"occlusion window: expected 3 positive integers"),
    ("occlusion", {"window": (1, 1, 1), "stride": (1, 0, 1)}, r"occlusion stride: expected 3 positive integers"),
    ("occlusion", {"window": (5, 1, 1)}, r"occlusion window \(5, 1, 1\): larger than the stack \(4, 4, 4\)"),
    ("gradcam", {"layer": "conv2", "layer_stride": (1, 2)}, r"gradcam layer_stride: expected a number or 3 numbers, got \(1, 2\)"),
    ("gradcam", {"layer": "conv2", "layer_offset": (0, 0, True)}, r"gradcam layer_offset: expected a number or 3 numbers"),
    ("gradcam", {"layer": "conv2", "layer_stride": 0}, r"gradcam layer_stride: expected positive values"),
])
def test_bad_options_say_what_came(small, method, options, message):
    w, x = small
    with pytest.raises(InputError, match=message):
        attribute(w, x, method=method, target=0, **options)


def test_unknown_option_lists_the_allowed_ones(small):
    w, x = small
    with pytest.raises(InputError, match=r"attribute\(method='occlusion'\): unknown option\(s\) "
                                         r"steps; this method takes window, stride"):
        attribute(w, x, method="occlusion", target=0, steps=3)
    with pytest.raises(InputError, match=r"this method takes none"):
        attribute(w, x, method="gradient_x_input", target=0, steps=3)


def test_occlusion_stride_defaults_to_the_window(small):
    # non-overlapping windows: each pixel's drop comes from its one window (Zeiler and Fergus
    # 2014), so the map is constant on every window
    w, x = small
    m = occlusion(w, x, lambda out: out[:, 0], window=(2, 2, 2), baseline_hu=-50.0)
    same = occlusion(w, x, lambda out: out[:, 0], window=(2, 2, 2), stride=(2, 2, 2),
                     baseline_hu=-50.0)
    torch.testing.assert_close(m, same)
    block = m[0, 0, 0:2, 0:2, 2:4]
    assert float(block.max() - block.min()) == 0.0
    torch.testing.assert_close(occlusion(w, x, lambda out: out[:, 0], window=2, baseline_hu=-50.0), m)


def test_gradcam_output_of_the_wrong_shape_is_refused_as_not_usable():
    class Flat(torch.nn.Module):
        def __init__(self):
            super().__init__()
            self.lin = torch.nn.Linear(4, 3)

        def encode_segments(self, x):
            b, s = x.shape[:2]
            return self.lin(x.reshape(b, s, -1)[..., :4])

        def head(self, pooled):
            return pooled

        def forward(self, x):
            return self.head(self.encode_segments(x).max(dim=1).values)

    w = wrap_model(Flat())
    # LayerNotUsable: the refusal a default Grad-CAM is skipped on, and a named one reports
    with pytest.raises(LayerNotUsable, match=r"gradcam layer 'lin': output per segment has shape"):
        attribute(w, h.patient(s=2, n=4, h=4, w=4), method="gradcam", target=0, layer="lin")


def test_upsample_offset_and_stride_per_axis_by_hand():
    # cell j at pixel offset + stride j; between centres linear, outside the edge value is kept
    coarse = torch.tensor([0.0, 10.0])
    up = upsample_at_centres(coarse, (6,), stride=3, offset=1)
    np.testing.assert_allclose(up.numpy(), [0, 0, 10 / 3, 20 / 3, 10, 10])
    grid = torch.tensor([[0.0, 1.0], [2.0, 3.0]])
    up2 = upsample_at_centres(grid, (3, 4), stride=(2, 1), offset=(0, 1))
    np.testing.assert_allclose(up2.numpy(), [[0, 0, 1, 1], [1, 1, 2, 2], [2, 2, 3, 3]])


def test_trace_repr_and_options_by_hand():
    w = wrap_model(h.tm.DarkestLumen())
    x = torch.full((1, 3, 2, 4, 4), 350.0)
    x[0, 1, 0, 1, 1] = 100.0  # feature -100 against -350 elsewhere
    tr = trace_segments(w, x, target=0, baseline_hu=350.0)
    assert repr(tr) == ("SegmentTrace(segments=3, channels=1, target=0, culprit=1, margin=250, "
                        "v(all)=-100, v(empty)=-350, shapley exact, baseline=350 HU)")
    sampled = trace_segments(w, x, target=0, baseline_hu=350.0, max_exact=2, n_permutations=1)
    assert sampled.n_permutations == 1 and np.isnan(sampled.shapley_stderr).all()
    assert "1 permutations" in repr(sampled)
    np.testing.assert_allclose(sampled.shapley, [0.0, 250.0, 0.0])  # one order, one gain
    two = trace_segments(w, x, target=0, baseline_hu=350.0, max_exact=2, n_permutations=2)
    np.testing.assert_allclose(two.shapley_stderr, 0.0, atol=1e-6)  # every order gives the same
    for bad in (0, 21, True, 2.0):
        with pytest.raises(InputError, match=r"max_exact: expected an integer 1..20"):
            trace_segments(w, x, target=0, max_exact=bad)
    with pytest.raises(InputError, match="n_permutations: expected a positive integer"):
        trace_segments(w, x, target=0, max_exact=2, n_permutations=0)
