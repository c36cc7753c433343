"""Mass shares and flags on maps placed by hand, where each share is known by construction
(common practice, no source: a share is mass in the region over all positive mass)."""

import dataclasses

import numpy as np
import pytest

from explain.attribution.trace import culprit_doubts
from explain.errors import InputError
from explain.quality import assess, check_settings
from explain.quality.flags import raise_flags
from explain.quality.mass import mass_fractions


def _one_map(explanation, place):
    """The explanation with one method whose map is 1 where ``place(s, map)`` puts it."""
    m = np.zeros_like(explanation.maps["integrated_gradients"])
    for s in range(m.shape[0]):
        place(s, m[s])
    return dataclasses.replace(explanation, maps={"integrated_gradients": m})


def test_centre_pixels_are_inside_the_vessel_and_the_rim_is_not(case, explanation):
    centre = _one_map(explanation, lambda s, a: a.__setitem__((slice(5, 15), 5, 5), 1.0))
    shares = mass_fractions(centre, case, settings=check_settings())
    got = shares["culprit"]["integrated_gradients"]
    assert got["inside_vessel"] == 1.0 and got["border"] == 0.0
    rim = _one_map(explanation, lambda s, a: a.__setitem__((slice(5, 15), 0, slice(None)), 1.0))
    got = mass_fractions(rim, case, settings=check_settings())["culprit"]["integrated_gradients"]
    assert got["inside_vessel"] == 0.0 and got["border"] == 1.0
    flags, methods = raise_flags(rim, {"integrated_gradients": got}, settings=check_settings())
    assert {"outside_vessel", "on_border"} <= set(flags)
    assert methods["on_border"] == ["integrated_gradients"]


def test_wall_margin_widens_the_vessel(case, explanation):
    # pixel (5, 8) lies 1.5 mm from the centre at 0.5 mm pixels; the lumen radius is 1.4 mm
    ring = _one_map(explanation, lambda s, a: a.__setitem__((slice(None), 5, 8), 1.0))
    tight = mass_fractions(ring, case, settings=check_settings(wall_margin_mm=0.0))
    loose = mass_fractions(ring, case, settings=check_settings(wall_margin_mm=0.2))
    assert tight["all_segments"]["integrated_gradients"]["inside_vessel"] == 0.0
    assert loose["all_segments"]["integrated_gradients"]["inside_vessel"] == 1.0


def test_calcium_share_counts_pixels_above_the_threshold(synth):
    case = synth.make_case(lesion_hu=900.0)
    e = synth.make_explanation(case)
    got = mass_fractions(e, case, settings=check_settings())
    s = e.sections.segment_ids.index(7)
    a = np.maximum(e.maps["integrated_gradients"][s].astype(np.float64), 0)
    bright = e.sections.sections[s].values > 600.0
    assert bright.any()
    assert got["per_segment"][7]["integrated_gradients"]["calcium"] == pytest.approx(
        a[bright].sum() / a.sum())
    higher = mass_fractions(e, case, settings=check_settings(calcium_hu=950.0))
    assert higher["per_segment"][7]["integrated_gradients"]["calcium"] == 0.0


def test_end_share_is_the_mass_within_end_mm_of_arc(case, explanation):
    first = _one_map(explanation, lambda s, a: a.__setitem__((0, 5, 5), 1.0))
    got = mass_fractions(first, case, settings=check_settings())
    assert got["all_segments"]["integrated_gradients"]["segment_end"] == 1.0
    flags, _ = raise_flags(first, got["culprit"], settings=check_settings())
    assert "at_segment_end" in flags


def test_a_map_with_no_positive_mass_has_no_share(case, explanation):
    empty = _one_map(explanation, lambda s, a: None)
    got = mass_fractions(empty, case, settings=check_settings())
    assert got["culprit"]["integrated_gradients"]["inside_vessel"] is None


def test_low_margin_is_the_trace_rule(case, explanation):
    target = {**explanation.target, "value_all": 1.6, "value_none": 0.0}
    e = dataclasses.replace(explanation, target=target, margin=0.1)
    flags = assess(e, case).flags
    doubts = culprit_doubts([s.shapley for s in e.segments], 0.1, 1.6, 0.0)
    assert doubts == ("low_margin",) and "low_margin" in flags
    relaxed = assess(e, case, flag_thresholds={"low_margin": 0.05}).flags
    assert "low_margin" not in relaxed


def test_thresholds_and_unknown_flags():
    assert check_settings(flag_thresholds={"on_border": 0.9}).flag_thresholds["on_border"] == 0.9
    with pytest.raises(InputError, match="unknown flag"):
        check_settings(flag_thresholds={"on_bone": 0.1})
    with pytest.raises(InputError, match="unknown"):
        check_settings(tolerance=1.0)
    with pytest.raises(InputError, match="tolerance_mm"):
        check_settings(tolerance_mm=-0.5)


def test_assessment_without_a_model_has_no_faithfulness(case, explanation):
    a = assess(explanation, case)
    d = a.to_dict()
    assert a.faithfulness is None and d["faithfulness"] is None
    assert set(d["localisation"]) >= {"culprit_hit", "pointing_hit", "peak_error_mm",
                                      "relevance_mass"}
    assert d["mass"]["regions"] == ["inside_vessel", "border", "calcium", "segment_end"]


def test_every_flag_has_words_and_is_documented():
    from pathlib import Path

    from explain.quality import FLAG_ORDER, FLAG_THRESHOLDS
    from explain.report.wording import FLAG_WORDS

    doc = (Path(__file__).parents[2] / "docs" / "report-format.md").read_text()
    assert set(FLAG_WORDS) == set(FLAG_ORDER) >= set(FLAG_THRESHOLDS)
    for flag in FLAG_ORDER:
        assert f"| `{flag}` |" in doc
