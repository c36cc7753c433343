"""The CAD-RADS 2.0 stenosis table, written out by hand for tests (not the library's code).

Source: Cury RC et al., "CAD-RADS 2.0 - 2022 Coronary Artery Disease-Reporting and Data System",
J Cardiovasc Comput Tomogr 2022;16:536-557, the stenosis categories; segment territories from
the SCCT 2014 segment model (Leipsic J et al., J Cardiovasc Comput Tomogr 2014;8:342-358), with
the ramus (17) counted with the LCx. The left-main bound is read as >= 50 % (our reading, as
in the library; the guideline's wording leaves >= against > open).
"""

# (lowest %, highest %, category) for one stenosis, rows as in the guideline's table
ROWS = (
    (0.0, 0.0, "0"),
    (1e-9, 24.999999, "1"),
    (25.0, 49.999999, "2"),
    (50.0, 69.999999, "3"),
    (70.0, 99.999999, "4A"),
    (100.0, 100.0, "5"),
)
ORDER = ["0", "1", "2", "3", "4A", "4B", "5"]
TERRITORY = {1: "RCA", 2: "RCA", 3: "RCA", 4: "RCA", 16: "RCA",
             5: "LM", 6: "LAD", 7: "LAD", 8: "LAD", 9: "LAD", 10: "LAD",
             11: "LCx", 12: "LCx", 13: "LCx", 14: "LCx", 15: "LCx", 17: "LCx", 18: "LCx"}


def cury_2022_category(stenosis_percent, *, plaque=False):
    """Category of a patient from ``{SCCT segment: % diameter stenosis}`` by the table above."""
    found = ["1" if plaque else "0"]
    for percent in stenosis_percent.values():
        found += [cat for lo, hi, cat in ROWS if lo <= float(percent) <= hi]
    worst = max(found, key=ORDER.index)
    if worst == "5":
        return "5"
    left_main = any(TERRITORY[int(s)] == "LM" and p >= 50 for s, p in stenosis_percent.items())
    severe = {TERRITORY[int(s)] for s, p in stenosis_percent.items() if p >= 70}
    if left_main or {"LAD", "LCx", "RCA"} <= severe:
        return "4B"
    return worst
