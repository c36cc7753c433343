"""CAD-RADS 2.0 categories against the published ranges.

Source: Cury RC et al., "CAD-RADS 2.0", J Cardiovasc Comput Tomogr 2022;16:536-557; the same
ranges as the 2016 version (Cury et al., JACC Cardiovasc Imaging 2016;9:1099-1113).
"""

import pytest

from explain.errors import InputError
from explain.grading import CATEGORIES, cadrads_category, category_rank, plaque_burden


# Band edges from Cury et al. 2022, Table 1: 0 %, 1-24 %, 25-49 %, 50-69 %, 70-99 %, 100 %.
@pytest.mark.parametrize("percent, category", [
    (0, "0"), (1, "1"), (24, "1"), (25, "2"), (49, "2"), (50, "3"), (69, "3"),
    (70, "4A"), (99, "4A"), (100, "5"),
])
def test_cury_2022_single_vessel_bands(percent, category):
    assert cadrads_category({6: percent}) == category


def test_cury_2022_plaque_without_stenosis_is_1():
    assert cadrads_category({}, plaque=True) == "1"
    assert cadrads_category({7: 0}) == "0"


def test_cury_2022_left_main_at_exactly_50_is_4b():
    # Left-main bound read as >= 50 % (reference-values.md: medium confidence, chosen and tested).
    assert cadrads_category({5: 50}) == "4B"
    assert cadrads_category({5: 49.9}) == "2"


def test_cury_2022_three_vessel_70_is_4b():
    assert cadrads_category({6: 70, 11: 70, 1: 70}) == "4B"
    # two vessels only: 4A ("70-99 % in one or two vessels")
    assert cadrads_category({6: 80, 7: 90, 1: 75}) == "4A"


def test_ramus_counts_for_its_setting():
    # ramus 17 with LAD and RCA: three territories only when the ramus counts as LCx
    assert cadrads_category({6: 75, 17: 75, 2: 75}, ramus_territory="LCx") == "4B"
    assert cadrads_category({6: 75, 17: 75, 2: 75}, ramus_territory="LAD") == "4A"


def test_cury_2022_occlusion_is_5_even_with_left_main():
    assert cadrads_category({5: 60, 1: 100}) == "5"


def test_category_order():
    assert [category_rank(c) for c in CATEGORIES] == list(range(7))


@pytest.mark.parametrize("bad", [{6: 101}, {6: -1}, {6: "a"}, {6: float("nan")}, {30: 10}])
def test_bad_stenosis(bad):
    with pytest.raises(InputError):
        cadrads_category(bad)


# Plaque-burden bands, Cury et al. 2022: P1 1-100, P2 101-300, P3 301-999, P4 >= 1000.
@pytest.mark.parametrize("score, band", [
    (0, None), (1, "P1"), (100, "P1"), (101, "P2"), (300, "P2"), (301, "P3"), (999, "P3"),
    (1000, "P4"), (4000, "P4"),
])
def test_cury_2022_plaque_burden(score, band):
    assert plaque_burden(score) == band


def test_agrees_with_the_hand_written_cury_2022_table_on_random_patients():
    # tests/phantom/cadrads_table.py writes the guideline's table out independently of
    # explain.grading; 400 seeded random patients of 1-6 segments must grade alike
    import importlib.util
    from pathlib import Path

    import numpy as np

    spec = importlib.util.spec_from_file_location(
        "cadrads_table", Path(__file__).parent / "phantom" / "cadrads_table.py")
    table = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(table)
    rng = np.random.default_rng(15)
    edges = [0, 1, 24, 25, 49, 50, 69, 70, 99, 100]
    segments = [1, 2, 3, 5, 6, 7, 9, 11, 12, 13, 16, 17]
    for _ in range(400):
        chosen = rng.choice(segments, size=rng.integers(1, 7), replace=False)
        stenosis = {int(s): float(rng.choice(edges) if rng.random() < 0.5 else rng.uniform(0, 100))
                    for s in chosen}
        plaque = bool(rng.random() < 0.3)
        assert cadrads_category(stenosis, plaque=plaque) == table.cury_2022_category(
            stenosis, plaque=plaque), stenosis


def test_error_messages_name_the_field_and_what_came():
    with pytest.raises(InputError, match=r"expected one of 0, 1, 2, 3, 4A, 4B, 5, got '6'"):
        category_rank("6")
    with pytest.raises(InputError, match=r"stenosis_percent: expected a mapping .* got list"):
        cadrads_category([40.0])
    with pytest.raises(InputError, match=r"stenosis_percent\[6\]: expected a number of percent, got 'a'"):
        cadrads_category({6: "a"})
    with pytest.raises(InputError, match=r"stenosis_percent\[6\]: a diameter stenosis lies in 0-100 %, got 101"):
        cadrads_category({6: 101})
    with pytest.raises(InputError, match=r"calcium_score: expected a finite score >= 0, got -1"):
        plaque_burden(-1)
    with pytest.raises(InputError, match="calcium_score"):
        plaque_burden(float("nan"))  # not finite, though not below 0
    with pytest.raises(InputError, match="calcium_score"):
        plaque_burden(float("inf"))
