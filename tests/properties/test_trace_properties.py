"""Properties of the segment trace for random small protocol models.

The culprit rule (docs/architecture.md, ``trace_segments``): the culprit is the segment with
the largest Shapley value of the game v(T) = target(head(max(baseline, max over T of the
segment features))), lowest index on ties. What follows from it, and is tested here:

- efficiency: the Shapley values sum to v(all) - v(none) (Shapley 1953);
- the values equal the definition, an average of marginal contributions over all orders,
  computed here by brute force from the head itself;
- dummy: a segment whose features never exceed the baseline's changes no coalition, gets 0,
  and is never the culprit while another segment has a positive value (Shapley 1953);
- with a head that never decreases when a pooled feature grows, a segment that another one
  dominates feature by feature never has a larger value than it, so the culprit is never
  strictly dominated.

"The culprit wins at least one channel or has the largest leave-one-out value" does NOT follow
from the Shapley rule: a segment that is second best on two channels can beat both winners.
``test_a_culprit_need_not_win_a_channel`` keeps that worked example, so the rule is stated
exactly and not as the looser statement.
"""

import itertools
import math

import numpy as np
import torch
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from explain.attribution import trace_segments
from explain.model import wrap_model

PROPS = settings(max_examples=30, deadline=None, derandomize=True, database=None,
                 suppress_health_check=[HealthCheck.too_slow])
SHAPE = (2, 3, 3)  # N, H, W


class Features(torch.nn.Module):
    """Protocol model with given per-segment features: the patch's mean selects nothing; the
    features are read from a table indexed by the segment's first pixel (its number)."""

    def __init__(self, table, head):
        super().__init__()
        self.register_buffer("table", torch.as_tensor(table, dtype=torch.float32))
        self.head_net = head

    def encode_segments(self, x):                     # (B, S, N, H, W) -> (B, S, C)
        index = x[:, :, 0, 0, 0].round().long()
        return self.table[index]

    def head(self, pooled):
        return self.head_net(pooled)


def _model(table, head):
    """``table[0]`` is what the baseline (a patch of 0 HU) encodes to; segment s is row s+1."""
    module = Features(np.vstack([np.zeros(np.shape(table)[1]), table]), head)
    return wrap_model(module)


def _patient(n_segments):
    x = torch.zeros((1, n_segments) + SHAPE)
    for s in range(n_segments):
        x[0, s] = s + 1
    return x


def _head(seed, channels, *, monotone):
    torch.manual_seed(seed)
    if monotone:   # positive weights and a ReLU: never decreases when a feature grows
        net = torch.nn.Sequential(torch.nn.Linear(channels, 4), torch.nn.ReLU(),
                                  torch.nn.Linear(4, 2))
        with torch.no_grad():
            for layer in (net[0], net[2]):
                layer.weight.abs_()
        return net
    return torch.nn.Sequential(torch.nn.Linear(channels, 5), torch.nn.Tanh(),
                               torch.nn.Linear(5, 2))


def _brute_force_shapley(table, head, target):
    """Shapley values by their definition: the mean marginal contribution over all S! orders."""
    table = torch.as_tensor(table, dtype=torch.float32)
    s = table.shape[0]

    def value(members):
        pooled = torch.zeros(table.shape[1])
        for m in members:
            pooled = torch.maximum(pooled, table[m])
        with torch.no_grad():
            return float(head(pooled[None].to(torch.float32))[0, target])

    phi = np.zeros(s)
    for order in itertools.permutations(range(s)):
        members = []
        for player in order:
            before = value(members)
            members.append(player)
            phi[player] += value(members) - before
    return phi / math.factorial(s)


tables = st.integers(1, 5).flatmap(lambda s: st.integers(1, 4).flatmap(
    lambda c: st.lists(st.lists(st.floats(-2, 3, width=32), min_size=c, max_size=c),
                       min_size=s, max_size=s)))


@PROPS
@given(tables, st.integers(0, 10**6), st.booleans(), st.integers(0, 1))
def test_shapley_values_are_efficient_and_match_their_definition(table, seed, monotone, target):
    table = np.array(table, dtype=np.float32)
    head = _head(seed, table.shape[1], monotone=monotone)
    trace = trace_segments(_model(table, head), _patient(len(table)), target=target)
    # Shapley 1953, efficiency; tolerance from float32 head outputs summed in float64
    assert math.isclose(trace.shapley.sum(), trace.value_all - trace.value_empty,
                        rel_tol=1e-6, abs_tol=1e-5)
    np.testing.assert_allclose(trace.shapley, _brute_force_shapley(table, head, target),
                               atol=1e-5)
    assert trace.culprit == int(np.argmax(trace.shapley))   # the rule itself, lowest index on ties
    order = np.sort(trace.shapley)[::-1]
    expected_margin = order[0] - (order[1] if len(order) > 1 else 0.0)
    assert math.isclose(trace.margin, expected_margin, abs_tol=1e-9)


@PROPS
@given(tables, st.integers(0, 10**6), st.integers(0, 1))
def test_a_segment_below_the_baseline_is_a_dummy(table, seed, target):
    table = np.array(table, dtype=np.float32)
    dummy = -np.abs(table[0]) - 0.5                     # below the baseline's 0 on every channel
    table = np.vstack([table, dummy])
    head = _head(seed, table.shape[1], monotone=False)
    trace = trace_segments(_model(table, head), _patient(len(table)), target=target)
    assert abs(trace.shapley[-1]) < 1e-6
    assert abs(trace.leave_one_out[-1]) < 1e-6
    if trace.shapley.max() > 1e-6:
        assert trace.culprit != len(table) - 1


@PROPS
@given(tables, st.integers(0, 10**6), st.floats(0.05, 1.0))
def test_with_a_monotone_head_the_culprit_is_never_strictly_dominated(table, seed, gap):
    table = np.array(table, dtype=np.float32)
    # add a segment that dominates the first one by ``gap`` on every channel
    table = np.vstack([table, table[0] + np.float32(gap)])
    head = _head(seed, table.shape[1], monotone=True)
    trace = trace_segments(_model(table, head), _patient(len(table)), target=0)
    assert trace.shapley[-1] >= trace.shapley[0] - 1e-6
    culprit_row = table[trace.culprit]
    dominated = [np.all(other > culprit_row) for other in table]
    assert not any(dominated) or trace.shapley.max() - trace.shapley.min() < 1e-6


def test_a_culprit_need_not_win_a_channel():
    """Worked example (hand computation): head = sum of the two pooled channels.

    A = (1, 0) wins channel 1, D = (0, 1) wins channel 2, B = (0.99, 0.99) wins neither. Each
    channel is a two-player game: phi_A = phi_D = (1 + 0.01) / 2 = 0.505 and phi_B = 2 x 0.495 =
    0.99. B is the culprit, with no winning channel and a leave-one-out value of 0, while A and
    D have 0.01 each.
    """
    head = torch.nn.Linear(2, 1, bias=False)
    with torch.no_grad():
        head.weight.fill_(1.0)
    table = np.array([[1.0, 0.0], [0.99, 0.99], [0.0, 1.0]], dtype=np.float32)
    trace = trace_segments(_model(table, head), _patient(3), target=0)
    np.testing.assert_allclose(trace.shapley, [0.505, 0.99, 0.505], atol=1e-6)
    np.testing.assert_allclose(trace.leave_one_out, [0.01, 0.0, 0.01], atol=1e-6)
    assert trace.culprit == 1
    assert 1 not in set(trace.winners.tolist())
