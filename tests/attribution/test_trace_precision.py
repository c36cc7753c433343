"""Coalition values in float64, and culprit ties within a tolerance.

Reference: an additive game, whose Shapley value is each player's own worth (Shapley 1953:
additivity, dummy and efficiency axioms), on a head with a large constant offset where float32
rounding (unit in the last place 2^-10 at 1e4) cannot tell the two segments apart.
"""

from __future__ import annotations

import pytest
import torch

from explain.attribution.trace import TIE_RTOL, trace_segments
from explain.model import wrap_model


class Additive(torch.nn.Module):
    """Segment s (up to 3) owns channel s; its feature is max(mean HU - 100, 0); head 1e4 + sum."""

    def __init__(self, float32_only=False):
        super().__init__()
        self.float32_only = float32_only
        self.offset = torch.nn.Parameter(torch.tensor(1.0e4), requires_grad=False)

    def encode_segments(self, x):
        b, s = x.shape[:2]
        level = torch.relu(x.mean(dim=(2, 3, 4)) - 100.0)  # (B, S)
        # three channels: room for the extra segment the wrapper's independence check adds
        return level[:, :, None] * torch.eye(3, dtype=x.dtype)[:s][None]  # (B, S, 3)

    def head(self, pooled):
        if self.float32_only and pooled.dtype != torch.float32:
            raise TypeError("this head runs in float32 only")
        return (self.offset + pooled.sum(dim=1))[:, None]


def _patient(a0, a1):
    x = torch.zeros(1, 2, 2, 3, 3)
    x[0, 0] = 100.0 + a0
    x[0, 1] = 100.0 + a1
    return x


def test_float64_coalitions_separate_what_float32_rounds_together():
    net = Additive()
    w = wrap_model(net)
    x = _patient(1.0, 1.0003)
    feats = w.encode(x)[0].double()
    want = [float(feats[0, 0]), float(feats[1, 1])]  # additive game: each segment's own worth
    # float32 cannot tell the two coalitions {0} and {1} apart at 1e4
    assert float(torch.tensor(1e4 + want[0], dtype=torch.float32)) == \
        float(torch.tensor(1e4 + want[1], dtype=torch.float32))
    trace = trace_segments(w, x, target=0)
    assert trace.value_dtype == "float64" and trace.precision_note is None
    assert trace.shapley.tolist() == pytest.approx(want, abs=1e-9)
    assert trace.culprit == 1 and trace.tied == ()
    assert trace.margin == pytest.approx(want[1] - want[0], abs=1e-9)


def test_equal_segments_are_a_tie_named_at_the_lower_index():
    trace = trace_segments(wrap_model(Additive()), _patient(2.0, 2.0), target=0)
    assert trace.culprit == 0 and trace.tied == (1,)
    assert abs(trace.margin) <= TIE_RTOL * abs(trace.value_all - trace.value_empty)


def test_a_head_that_refuses_float64_keeps_float32_and_says_why():
    trace = trace_segments(wrap_model(Additive(float32_only=True)), _patient(1.0, 3.0), target=0)
    assert trace.value_dtype == "float32"
    assert "float32 only" in trace.precision_note
    assert trace.culprit == 1
