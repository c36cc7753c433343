"""SCCT segment numbering, checked against the SCCT 2014 table.

Source: Leipsic J et al., J Cardiovasc Comput Tomogr 2014;8:342-358 (segments 1-15 after the AHA
model, Austen WG et al., Circulation 1975).
"""

import pytest

from explain.anatomy import SEGMENT_TABLE, segment_info
from explain.errors import InputError

# (id, abbreviation, territory) rows of the SCCT 2014 table (Leipsic et al. 2014).
SCCT_2014 = [
    (1, "pRCA", "RCA"), (2, "mRCA", "RCA"), (3, "dRCA", "RCA"), (4, "R-PDA", "RCA"),
    (5, "LM", "LM"), (6, "pLAD", "LAD"), (7, "mLAD", "LAD"), (8, "dLAD", "LAD"),
    (9, "D1", "LAD"), (10, "D2", "LAD"), (11, "pCx", "LCx"), (12, "OM1", "LCx"),
    (13, "LCx", "LCx"), (14, "OM2", "LCx"), (15, "L-PDA", "LCx"), (16, "R-PLB", "RCA"),
    (18, "L-PLB", "LCx"),
]


@pytest.mark.parametrize("number, abbr, territory", SCCT_2014)
def test_scct_2014_table(number, abbr, territory):
    info = segment_info(number)
    assert (info.id, info.abbr, info.territory) == (number, abbr, territory)


def test_scct_2014_16_17_18_not_swapped():
    # Leipsic et al. 2014: 16 = posterolateral from RCA, 17 = ramus, 18 = posterolateral from LCx.
    assert "ramus" in segment_info(17).name
    assert "RCA" in segment_info(16).name and segment_info(16).territory == "RCA"
    assert "LCx" in segment_info(18).name and segment_info(18).territory == "LCx"


def test_ramus_territory_is_a_setting():
    # SCCT 2014 gives the ramus no fixed territory; common practice counts it with the LCx.
    assert segment_info(17).territory == "LCx"
    assert segment_info(17, ramus_territory="LAD").territory == "LAD"
    with pytest.raises(InputError, match="ramus_territory"):
        segment_info(17, ramus_territory="RCA")


def test_table_has_18_segments():
    assert sorted(SEGMENT_TABLE) == list(range(1, 19))


@pytest.mark.parametrize("bad", [0, 19, -1, "x", 2.5, True, None])
def test_bad_ids(bad):
    with pytest.raises(InputError, match="1-18|1 to 18"):
        segment_info(bad)
