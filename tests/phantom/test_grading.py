"""The CAD-RADS 2.0 category of each phantom's reference, and cohorts spanning every category.

Source: Cury RC et al., CAD-RADS 2.0, J Cardiovasc Comput Tomogr 2022;16:536-557: 0 (no plaque,
no stenosis), 1 (1-24 % or plaque without stenosis), 2 (25-49 %), 3 (50-69 %), 4A (70-99 % in
one or two vessels), 4B (left main >= 50 % -- the bound read as >= 50 %, medium confidence --
or >= 70 % in all three of LAD, LCx, RCA), 5 (100 %).
"""

import pytest

import importlib.util
from pathlib import Path

from explain.grading import CATEGORIES
from explain.phantom import make_phantom, plan_cohort

_spec = importlib.util.spec_from_file_location("cadrads_table",
                                               Path(__file__).with_name("cadrads_table.py"))
_table = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(_table)
cury_2022_category = _table.cury_2022_category  # the hand-written table, not explain.grading

# Hand-written cases with the category the Cury 2022 table gives them (not computed here).
HAND_WRITTEN = [
    ([], "0"),  # no plaque, no stenosis
    (["2:0:soft"], "1"),  # plaque without stenosis
    (["9:20:calcified"], "1"),  # 1-24 %
    (["6:30:soft", "12:10"], "2"),  # worst 25-49 %
    (["7:55:calcified"], "3"),  # 50-69 %
    (["6:75", "13:80"], "4A"),  # >= 70 % in two vessels
    (["5:50:soft"], "4B"),  # left main exactly 50 %
    (["5:49:soft"], "2"),  # left main just below 50 %: an ordinary 25-49 %
    (["7:75", "13:80", "2:90"], "4B"),  # >= 70 % in LAD, LCx and RCA
    (["8:100", "1:40"], "5"),  # total occlusion
]


@pytest.mark.parametrize("lesions, category", HAND_WRITTEN)
def test_reference_grade_per_cury_2022(lesions, category):
    # coarse voxels: the grade does not depend on the rendering
    case = make_phantom(seed=11, lesions=lesions, spacing_mm=1.2)
    assert case.reference["grade"] == category
    assert case.reference["grade"] == cury_2022_category(case.reference["stenosis_percent"],
                                                         plaque=bool(lesions))


def test_reference_lists_every_segment_with_its_worst_stenosis():
    case = make_phantom(seed=3, lesions=["6:40", "6:65:soft"], spacing_mm=1.2)
    stenosis = case.reference["stenosis_percent"]
    assert set(stenosis) == set(case.segment_ids)
    assert stenosis[6] == 65.0 and stenosis[1] == 0.0
    assert case.reference["grade"] == "3"


@pytest.mark.parametrize("seed", range(6))
def test_any_seven_cases_span_every_category_cury_2022(seed):
    entries = plan_cohort(count=7, seed=seed)
    assert sorted({e.category for e in entries}) == sorted(CATEGORIES)
    # the category each pattern was built for is the one Cury 2022 gives its lesions
    for entry in entries:
        assert entry.category == entry.pattern.split("-")[0]


@pytest.mark.parametrize("seed", range(6))
def test_eight_cases_hold_both_roads_to_4b(seed):
    entries = plan_cohort(count=8, seed=seed)
    left_main = [e for e in entries if any(s.segment == 5 and s.percent >= 50 for s in e.lesions)]
    territories = {1: "RCA", 2: "RCA", 3: "RCA", 4: "RCA", 16: "RCA", 6: "LAD", 7: "LAD",
                   8: "LAD", 9: "LAD", 10: "LAD", 11: "LCx", 12: "LCx", 13: "LCx", 14: "LCx"}
    three_vessel = [e for e in entries if {territories.get(s.segment) for s in e.lesions
                                           if s.percent >= 70} >= {"RCA", "LAD", "LCx"}]
    assert left_main and all(e.category == "4B" for e in left_main)
    assert three_vessel and all(e.category == "4B" for e in three_vessel)


def test_cohort_plan_is_deterministic_and_seeds_differ():
    a, b = plan_cohort(count=16, seed=2), plan_cohort(count=16, seed=2)
    assert a == b
    assert len({e.seed for e in a}) == 16
    assert plan_cohort(count=16, seed=3) != a


def test_iter_cohort_yields_the_planned_cases_in_memory():
    from explain.phantom import iter_cohort

    plan = plan_cohort(count=3, seed=5)
    cases = list(iter_cohort(count=3, seed=5, spacing_mm=1.5))
    assert [c.case_id for c in cases] == [e.case_id for e in plan]
    assert [c.seed for c in cases] == [e.seed for e in plan]
    assert [c.reference["grade"] for c in cases] == [e.category for e in plan]


@pytest.mark.parametrize("stenosis, grade, expected", [
    ({5: 52.0, 7: 62.0, 11: 42.0}, "4B", [5]),  # left main >= 50 % (Cury 2022)
    ({2: 81.0, 10: 76.0, 12: 93.0, 6: 8.0}, "4B", [2, 10, 12]),  # three vessels >= 70 %
    ({16: 100.0, 13: 68.0}, "5", [16]),
    ({12: 73.0, 1: 29.0}, "4A", [12]),
    ({1: 56.0, 11: 17.0}, "3", [1]),
    ({2: 47.0, 7: 14.0}, "2", [2]),
])
def test_grade_segments_name_what_sets_the_category(stenosis, grade, expected):
    from explain.phantom.cohort import grade_segments

    assert grade_segments(stenosis, grade) == expected
    assert cury_2022_category(stenosis) == grade  # graded as stated, by the hand-written table
