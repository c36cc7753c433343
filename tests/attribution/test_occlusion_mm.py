"""The occlusion window is given in mm along the arc and converted per segment.

Reference: captum ``Occlusion`` on the whole model (Zeiler and Fergus 2014), run with the window
each segment's spacing asks for; the conversion is checked against the plain arithmetic
``round(window_mm / step)`` written out by hand.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest
import torch
from captum.attr import Occlusion

from explain.attribution import attribute
from explain.attribution.occlusion import WINDOW_MM, arc_windows
from explain.errors import InputError
from explain.model import wrap_model
from explain.report.explanation import OCCLUSION_WINDOW_MM, method_settings

_h = importlib.util.spec_from_file_location("h", Path(__file__).with_name("helpers.py"))
h = importlib.util.module_from_spec(_h)
_h.loader.exec_module(h)


def test_window_covers_the_same_mm_on_short_and_long_segments():
    # 8 mm and 60 mm segments with 32 cross-sections: steps 8/31 and 60/31 mm
    steps = [8.0 / 31, 60.0 / 31]
    windows, strides = arc_windows(4.0, steps, 32)
    assert [w[0] for w in windows] == [round(4.0 / 8.0 * 31), round(4.0 / 60.0 * 31)]  # 16, 2
    for (along, *_), step in zip(windows, steps):
        assert abs(along * step - 4.0) <= step / 2 + 1e-12  # within half a cross-section in mm
    assert [s[0] for s in strides] == [8, 1]


def test_window_is_clipped_to_the_stack_and_at_least_one_section():
    windows, _ = arc_windows(4.0, [0.01, 100.0], 6, pixels=(3, 2))
    assert windows == [(6, 3, 2), (1, 3, 2)]
    with pytest.raises(InputError, match="window_mm"):
        arc_windows(0.0, [1.0], 6)
    with pytest.raises(InputError, match="arc_step_mm"):
        arc_windows(4.0, [0.0], 6)


def test_mm_window_equals_captum_with_each_segments_window():
    net = h.tm.SmallConv()
    w = wrap_model(net)
    x = h.patient(s=2, n=6, seed=4)
    steps = [0.5, 2.0]  # 4 mm -> 6 (clipped from 8) and 2 cross-sections
    ours = attribute(w, x, method="occlusion", target=1, window=(1, 3, 3), window_mm=4.0,
                     arc_step_mm=steps, baseline_hu=-20.0)
    windows, strides = arc_windows(4.0, steps, 6, pixels=(3, 3))
    for s, (win, stride) in enumerate(zip(windows, strides)):
        ref = Occlusion(net).attribute(
            x.clone(), sliding_window_shapes=(1, *win), strides=(1, *stride), baselines=-20.0,
            target=1)
        torch.testing.assert_close(ours[:, s], ref[:, s], rtol=1e-5, atol=1e-5)


def test_settings_record_the_mm_and_each_segments_window():
    options = method_settings("occlusion", (32, 24, 24), seed=0, arc_step_mm=[0.25, 1.5])
    assert OCCLUSION_WINDOW_MM == WINDOW_MM == options["window_mm"] == 4.0
    assert options["window"] == [[16, 8, 8], [3, 8, 8]]  # round(16.0), round(2.67)
    assert options["stride"] == [[8, 8, 8], [1, 8, 8]]
    assert options["arc_step_mm"] == [0.25, 1.5]


def test_window_below_one_mm_and_one_scalar_spacing():
    # round(0.6 / 0.2) = 3 cross-sections; a single spacing given as a number is one segment
    windows, strides = arc_windows(0.6, 0.2, 10, pixels=2)
    assert windows == [(round(0.6 / 0.2), 2, 2)] and strides == [(1, 2, 2)]


@pytest.mark.parametrize("bad", [True, "4", float("nan"), float("inf"), -1.0, None])
def test_bad_window_mm_says_what_came(bad):
    with pytest.raises(InputError, match=r"^occlusion window_mm: expected a length > 0 in mm, got "):
        arc_windows(bad, [1.0], 6)


def test_stride_along_the_arc_is_half_the_window():
    # window 7 sections -> stride 7 // 2 = 3; 1 section -> 1 (never 0)
    windows, strides = arc_windows(7.0, [1.0, 10.0], 20, pixels=(4, 5))
    assert windows == [(7, 4, 5), (1, 4, 5)]
    assert strides == [(3, 4, 5), (1, 4, 5)]
