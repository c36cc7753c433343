"""Segment tracing against Shapley's axioms, brute force, closed forms and the whole model."""

from __future__ import annotations

import importlib.util
import itertools
import math
from pathlib import Path

import numpy as np
import pytest
import torch

from explain.attribution import exact_shapley, trace_segments
from explain.errors import InputError
from explain.model import wrap_model

_h = importlib.util.spec_from_file_location("h", Path(__file__).with_name("helpers.py"))
h = importlib.util.module_from_spec(_h)
_h.loader.exec_module(h)


def _value(w, x, members, k, baseline_hu=0.0):
    """v(T) on the whole model: segments of T plus one segment filled with baseline_hu."""
    base = torch.full_like(x[:, :1], baseline_hu)
    inp = torch.cat([x[:, list(members)], base], dim=1)
    with torch.no_grad():
        return float(w.forward(inp)[0, k])


def _brute_force(w, x, k):
    """Shapley 1953: mean marginal contribution over all S! orders, on the whole model."""
    s = x.shape[1]
    cache = {}

    def v(members):
        key = tuple(sorted(members))
        if key not in cache:
            cache[key] = _value(w, x, key, k)
        return cache[key]

    phi = np.zeros(s)
    perms = list(itertools.permutations(range(s)))
    for perm in perms:
        for j, p in enumerate(perm):
            phi[p] += v(perm[: j + 1]) - v(perm[:j])
    return phi / len(perms)


@pytest.mark.parametrize("s", [1, 3, 5, 7])
def test_exact_shapley_equals_brute_force_over_permutations(s):
    # Shapley 1953: phi_i is the mean marginal contribution of i over all orders of the players
    w = wrap_model(h.tm.SmallConv())
    x = h.patient(s=s, seed=s)
    tr = trace_segments(w, x, target=1)
    np.testing.assert_allclose(tr.shapley, _brute_force(w, x, 1), rtol=1e-5, atol=1e-6)


def test_efficiency_symmetry_null_player():
    # Shapley 1953 axioms: efficiency, symmetry, null player
    w = wrap_model(h.tm.SmallConv())
    x = h.patient(s=6, seed=3)
    x[:, 4] = x[:, 1]  # segments 1 and 4 are interchangeable
    x[:, 5] = -40.0  # same HU as the baseline: adds nothing to any coalition
    tr = trace_segments(w, x, target=2, baseline_hu=-40.0)
    v_all = _value(w, x, range(6), 2, -40.0)
    v_empty = _value(w, x, [], 2, -40.0)
    assert tr.shapley.sum() == pytest.approx(v_all - v_empty, abs=1e-6)
    assert tr.value_all == pytest.approx(v_all, abs=1e-6)
    assert tr.value_empty == pytest.approx(v_empty, abs=1e-6)
    assert tr.shapley[1] == pytest.approx(tr.shapley[4], abs=1e-7)
    assert tr.shapley[5] == pytest.approx(0.0, abs=1e-7)
    assert tr.leave_one_out[5] == pytest.approx(0.0, abs=1e-7)


def test_leave_one_out_against_the_whole_model():
    w = wrap_model(h.tm.PlainConv("amax"))
    x = h.patient(s=5, seed=7)
    tr = trace_segments(w, x, target="grade:3")
    for s in range(5):
        rest = [i for i in range(5) if i != s]
        with torch.no_grad():
            base = torch.zeros_like(x[:, :1])
            full = float(w.forward(torch.cat([x, base], 1))["grade"][0, 3])
            without = float(w.forward(torch.cat([x[:, rest], base], 1))["grade"][0, 3])
        assert tr.leave_one_out[s] == pytest.approx(full - without, abs=1e-6)


def _airport(c):
    """Littlechild and Owen 1973: Shapley value of v(T) = max_{i in T} c_i, c_i >= 0.

    With c sorted ascending, phi_(i) = sum_{j <= i} (c_(j) - c_(j-1)) / (n - j + 1), c_(0) = 0.
    """
    n = len(c)
    order = np.argsort(c, kind="stable")
    cs = np.concatenate([[0.0], np.asarray(c)[order]])
    steps = np.diff(cs) / (n - np.arange(n))
    phi = np.empty(n)
    phi[order] = np.cumsum(steps)
    return phi


def test_darkest_lumen_max_game_matches_closed_form_and_culprit():
    # feature = minus the darkest central value; head = identity, so v(T) = max over T and the
    # baseline of that feature: an "airport game" with a closed-form Shapley value
    # (Littlechild SC, Owen G, Management Science 1973;20:370-372; from memory, high)
    w = wrap_model(h.tm.DarkestLumen())
    x = torch.full((1, 6, 3, 4, 4), 350.0)
    darkest = [300.0, 120.0, 250.0, 20.0, 350.0, 200.0]
    for s, v in enumerate(darkest):
        x[0, s, 1, 1, 2] = v
    tr = trace_segments(w, x, target=0, baseline_hu=400.0)
    c = np.array([400.0 - v for v in darkest])  # -v - (-400): gain over the baseline segment
    np.testing.assert_allclose(tr.shapley, _airport(c), atol=1e-5)
    assert tr.culprit == 3 and tr.winners.tolist() == [3]
    np.testing.assert_allclose(tr.gradient_x_feature, [0, 0, 0, -20.0, 0, 0], atol=1e-6)  # grad 1 x feature


def test_permutation_sampling_above_twenty_segments():
    w = wrap_model(h.tm.DarkestLumen())
    rng = np.random.default_rng(1)
    darkest = rng.uniform(0.0, 300.0, size=22)
    x = torch.full((1, 22, 2, 4, 4), 350.0)
    x[0, :, 0, 1, 1] = torch.as_tensor(darkest, dtype=torch.float32)
    tr = trace_segments(w, x, target=0, baseline_hu=350.0, n_permutations=400, seed=5)
    want = _airport(350.0 - darkest.astype(np.float32))  # Littlechild and Owen 1973
    assert tr.shapley_stderr is not None and tr.n_permutations == 400 and tr.seed == 5
    z = np.abs(tr.shapley - want) / np.maximum(tr.shapley_stderr, 1e-9)
    assert np.all((z < 5) | (np.abs(tr.shapley - want) < 1e-4))
    assert tr.culprit == int(np.argmin(darkest))
    again = trace_segments(w, x, target=0, baseline_hu=350.0, n_permutations=400, seed=5)
    np.testing.assert_array_equal(again.shapley, tr.shapley)  # seeded


def test_exact_shapley_two_player_worked_example():
    # two players: phi_1 = (v(1) - v(0) + v(12) - v(2)) / 2 (Shapley 1953, n = 2 by hand)
    v = np.array([0.5, 1.5, 2.5, 5.0])
    np.testing.assert_allclose(exact_shapley(v, 2), [(1.0 + 2.5) / 2, (2.0 + 3.5) / 2])
    assert math.isclose(exact_shapley(v, 2).sum(), v[3] - v[0])


def test_trace_errors_and_repr():
    w = wrap_model(h.tm.SmallConv())
    with pytest.raises(InputError, match="one patient"):
        trace_segments(w, torch.zeros(2, 3, 4, 6, 6), target=0)
    with pytest.raises(InputError, match="max_exact"):
        trace_segments(w, torch.zeros(1, 3, 4, 6, 6), target=0, max_exact=25)
    tr = trace_segments(w, h.patient(s=3), target="predicted")
    assert "culprit=" in repr(tr) and "shapley exact" in repr(tr)
    assert isinstance(tr.target_index, int)


def test_culprit_doubts_rules_by_hand():
    # Hand-worked cases of the two documented rules (our own rule, common practice, no source):
    # a margin equal to a tenth of |v(all) - v(none)| is not below it: clear
    from explain.attribution.trace import LOW_MARGIN_FRACTION, culprit_doubts

    assert LOW_MARGIN_FRACTION == 0.10
    assert culprit_doubts([0.55, 0.45], 0.1, 1.0, 0.0) == ()
    assert culprit_doubts([0.54, 0.46], 0.08, 1.0, 0.0) == ("low_margin",)
    assert culprit_doubts([0.0, 0.0], 0.0, 0.0, 0.0) == ("no_positive_segment",)
    assert culprit_doubts([-0.1, -0.4], 0.3, -0.5, 0.0) == ("no_positive_segment",)
    assert culprit_doubts([0.0, -0.4], 0.4, -0.4, 0.0) == ("no_positive_segment",)
