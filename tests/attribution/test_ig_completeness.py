"""An Integrated Gradients completeness gap above 5 % of |F(x) - F(baseline)| is a warning.

References: captum ``IntegratedGradients`` and its convergence delta; completeness
(Sundararajan, Taly and Yan 2017, Proposition 1) and their advice that the sum come within 5 %.
"""

from __future__ import annotations

import pytest
import torch
from captum.attr import IntegratedGradients

from explain.attribution.integrated import COMPLETENESS_SHARE, completeness_finding


def _steep(x):  # F(x) = sum(x^4): far from linear, so a 2-step Riemann sum misses much
    return (x ** 4).sum(dim=1)


@pytest.mark.parametrize("steps, warned", [(2, True), (200, False)])
def test_gap_from_captum_is_judged_against_the_change_of_the_target(steps, warned):
    x = torch.tensor([[1.0, 0.5, 1.5]], dtype=torch.float64)
    attr, delta = IntegratedGradients(_steep).attribute(
        x, baselines=0.0, n_steps=steps, method="riemann_middle", return_convergence_delta=True)
    change = float(_steep(x) - _steep(torch.zeros_like(x)))
    text, warning = completeness_finding(float(attr.sum()), float(delta))
    assert warning is warned
    assert (abs(float(delta)) / abs(change) > COMPLETENESS_SHARE) is warned
    assert f"{abs(change):.3g}" in text
    assert ("use more steps" in text) is warned


def test_share_boundary():
    assert COMPLETENESS_SHARE == 0.05
    assert completeness_finding(1.0 + 0.049, 0.049)[1] is False  # F(x) - F(b) = 1.0
    assert completeness_finding(1.0 + 0.051, 0.051)[1] is True
    assert completeness_finding(0.3, 0.3)[1] is True  # no change of the target at all


@pytest.mark.parametrize("change, delta, warned", [
    (10.0, 0.4, False),   # 4 % of a change of 10
    (10.0, -0.6, True),   # 6 %, the sign of the gap does not matter
    (0.1, 0.006, True),   # 6 % of a change of 0.1
    (-0.1, 0.004, False),  # 4 % of |-0.1|
])
def test_share_is_relative_to_the_size_of_the_change(change, delta, warned):
    # Completeness (Sundararajan et al. 2017): sum of attributions = F(x) - F(b) + delta;
    # the gap is judged as |delta| / |F(x) - F(b)| (hand-derived values).
    text, warning = completeness_finding(change + delta, delta)
    assert warning is warned
    assert f"target units, {100 * abs(delta) / abs(change):.3g} % of |F(x) - F(baseline)| = " \
        f"{abs(change):.3g}" in text
    assert f"{delta:.3g} target units" in text


def test_no_change_and_no_gap_is_not_a_warning():
    text, warning = completeness_finding(0.0, 0.0)
    assert warning is False
    assert "0 % of |F(x) - F(baseline)| = 0" in text


def test_a_gap_of_exactly_five_percent_is_a_note_and_above_it_the_text_says_so():
    # 0.125 / 2.5 is 0.05 in binary floating point as well: the share itself is still a note
    assert completeness_finding(2.5 + 0.125, 0.125)[1] is False
    text, warning = completeness_finding(2.5 + 0.25, 0.25)
    assert warning is True
    assert text.endswith("; above 5 %: the map does not account for the whole change of the "
                         "target; use more steps before reading it")
