"""The cohort numbers against their definitions and scipy.

Wilson score interval: Wilson EB, "Probable inference, the law of succession, and statistical
inference", J Am Stat Assoc 1927; checked against ``scipy.stats.binomtest(k, n)
.proportion_ci(method="wilson")``. Binary views: CAD-RADS 2.0 (Cury et al. 2022), any disease
= category >= 1, obstructive = category >= 3.
"""

import pytest
from scipy.stats import binomtest

from explain.audit.summary import binary_view, confusion_matrix, summarise, wilson_interval
from explain.grading import CATEGORIES


@pytest.mark.parametrize("k,n", [(0, 1), (1, 1), (0, 7), (3, 7), (7, 7), (8, 10), (41, 97),
                                 (1, 250), (500, 1000)])
def test_wilson_matches_scipy(k, n):
    # scipy.stats.binomtest ... proportion_ci(method="wilson"), confidence 0.95 (Wilson 1927)
    ci = binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    low, high = wilson_interval(k, n)
    assert low == pytest.approx(ci.low, abs=1e-12)
    assert high == pytest.approx(ci.high, abs=1e-12)


def test_wilson_of_no_trials_is_undefined():
    assert wilson_interval(0, 0) == (None, None)


def test_confusion_and_binary_views_by_hand():
    # hand-counted: reference -> predicted
    pairs = [("0", "0"), ("0", "1"), ("2", "3"), ("3", "2"), ("4A", "4A"), ("5", "4B"),
             ("1", "0")]
    m = confusion_matrix(pairs)
    assert len(m) == 7 and all(len(r) == 7 for r in m)
    assert m[CATEGORIES.index("0")][CATEGORIES.index("1")] == 1
    assert m[CATEGORIES.index("5")][CATEGORIES.index("4B")] == 1
    assert sum(map(sum, m)) == len(pairs)
    any_disease = binary_view(pairs, "1")
    # truth >= 1: 2, 3, 4A, 5, 1 -> said >= 1 for 2->3, 3->2, 4A, 5->4B; 1->0 missed
    assert (any_disease["tp"], any_disease["fn"]) == (4, 1)
    # truth 0: 0->0 right, 0->1 wrong
    assert (any_disease["tn"], any_disease["fp"]) == (1, 1)
    obstructive = binary_view(pairs, "3")
    # truth >= 3: 3->2 missed, 4A, 5->4B caught; truth < 3: 0,0,2->3 (fp),1
    assert (obstructive["tp"], obstructive["fn"], obstructive["tn"], obstructive["fp"]) == (2, 1, 3, 1)
    assert obstructive["sensitivity"]["value"] == pytest.approx(2 / 3)


def test_summary_counts_rates_and_flags():
    rows = [
        {"status": "ok", "reference_grade": "3", "predicted_grade": "3", "grade_error": 0,
         "culprit_hit": True, "margin": 0.5, "flags": "low_margin;on_border",
         "ig_pointing_hit": True, "ig_peak_error_mm": 1.0, "ig_relevance_mass": 0.4},
        {"status": "ok", "reference_grade": "2", "predicted_grade": "4A", "grade_error": 2,
         "culprit_hit": False, "margin": 0.1, "flags": "low_margin",
         "ig_pointing_hit": False, "ig_peak_error_mm": 5.0, "ig_relevance_mass": 0.2},
        {"status": "failed", "reference_grade": None, "predicted_grade": None, "flags": ""},
    ]
    s = summarise(rows, methods=["ig"])
    assert s["counts"] == {"rows": 3, "ok": 2, "failed": 1, "with_reference": 2,
                           "graded_pairs": 2}
    assert s["accuracy"]["value"] == 0.5 and s["within_one"]["value"] == 0.5
    assert s["culprit_hit_rate"]["k"] == 1 and s["culprit_hit_rate"]["n"] == 2
    assert s["pointing_rate"]["ig"]["value"] == 0.5
    assert s["metrics"]["ig_peak_error_mm"] == {"n": 2, "mean": 3.0, "median": 3.0}
    assert s["flags"] == {"low_margin": 2, "on_border": 1}


def test_along_arc_localisation_worked_by_hand():
    """Arc distance from a point to closed intervals, worked by hand (no outside source needed:
    the distance from x to [a, b] is max(a - x, x - b, 0))."""
    from explain.audit.rows import along_arc_localisation, report_row
    rep = {"culprit": {"segment_id": 6, "margin": 0.3,
                       "where": {"g": {"arc_mm": 31.5}, "o": {"arc_mm": 9.0}, "n": {"arc_mm": None}}},
           "reference": {"grade": "3", "stenosis_percent": {"6": 60, "1": 20},
                         "lesions": [{"segment": 6, "start_mm": 10.0, "end_mm": 14.0},
                                     {"segment": 6, "start_mm": 30.0, "end_mm": 33.0},
                                     {"segment": 1, "start_mm": 0.0, "end_mm": 50.0}]},
           "segments": [{"id": 1}, {"id": 6}], "prediction": {"grade": "3"},
           "model": {"grade_labels": ["0", "1", "2", "3", "4A", "4B", "5"]}}
    assert along_arc_localisation(rep, "g") == (True, 0.0)
    assert along_arc_localisation(rep, "o") == (False, 1.0)
    assert along_arc_localisation(rep, "n") == (None, None)
    row = report_row(rep, case_id="c", case="c/case.json", seconds=1.0, methods=["g", "o"])
    assert row["culprit_hit"] is True and row["o_peak_error_mm"] == 1.0
    assert row["grade_error"] == 0


def test_flags_without_a_quality_object_follow_the_shared_doubts_rule():
    """The low-margin rule of explain.attribution.trace.culprit_doubts (our own rule: below 10 %
    of |v(all) - v(none)|, common practice, no source) applied to the report's numbers."""
    from explain.audit.rows import report_row
    rep = {"culprit": {"segment_id": 1, "margin": 0.05, "where": {}},
           "target": {"value_all": 1.0, "value_none": 0.05},
           "segments": [{"id": 1, "shapley": 0.5}, {"id": 2, "shapley": 0.45}],
           "prediction": {"grade": None}, "model": {"grade_labels": None}}
    assert report_row(rep, case_id="c", case="c", seconds=0.0, methods=[])["flags"] == "low_margin"
    rep["culprit"]["margin"] = 0.5
    assert report_row(rep, case_id="c", case="c", seconds=0.0, methods=[])["flags"] == ""
