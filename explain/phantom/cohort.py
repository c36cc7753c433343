"""Cohorts of phantom cases whose lesion patterns span every CAD-RADS 2.0 stenosis category.

Case ``i`` of a cohort follows pattern ``i mod 8`` of :data:`PATTERNS`, so any 7 consecutive
cases span the categories 0, 1, 2, 3, 4A, 4B, 5 (Cury et al. 2022) and 8 or more hold both roads
to 4B: a left-main stenosis >= 50 % and >= 70 % in all three of the LAD, LCx and RCA
territories. Within a pattern, the segments, percentages and plaque kinds are drawn from the
cohort seed; each case then gets its own seed, recorded in the cohort CSV, so
``make_phantom(seed=<seed>, lesions=<lesions>)`` (or ``culprit-lens phantom --seed <seed>
--lesion ...``) rebuilds it exactly.
"""

from __future__ import annotations

import csv
import io
import numbers
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..anatomy import segment_info
from ..errors import InputError
from ..grading import cadrads_category
from ..io import atomic_output_dir, write_text
from .build import check_seed, make_phantom
from .lesions import KINDS, LesionSpec
from .writer import check_image_format, write_case_files

__all__ = ["PATTERNS", "CohortEntry", "plan_cohort", "iter_cohort", "write_cohort",
           "COHORT_COLUMNS", "grade_segments"]

#: Pattern names in cycle order; the 4B patterns are 4B-LM (left main) and 4B-3V (three vessels).
PATTERNS = ("0", "1", "2", "3", "4A", "4B-LM", "5", "4B-3V")

#: Segments every phantom has, by territory (SCCT 2014 numbers; the left main apart).
_TERRITORY_SEGMENTS = {
    "RCA": (1, 2, 3, 4, 16),
    "LAD": (6, 7, 8, 9, 10),
    "LCx": (11, 12, 13, 14),
}
_ALL = (5,) + tuple(s for group in _TERRITORY_SEGMENTS.values() for s in group)

COHORT_COLUMNS = ("case", "case_id", "grade", "seed", "pattern", "lesions", "n_lesions",
                  "max_stenosis_percent", "grade_segments", "lesion_extents_mm")


@dataclass(frozen=True)
class CohortEntry:
    """One planned case of a cohort.

    Attributes
    ----------
    index : int
    case_id : str
        Also the case's folder name.
    seed : int
        The case's own seed.
    pattern : str
        One of :data:`PATTERNS`.
    lesions : tuple of LesionSpec
    """

    index: int
    case_id: str
    seed: int
    pattern: str
    lesions: tuple

    @property
    def category(self):
        """The CAD-RADS 2.0 category the lesions imply (Cury et al. 2022)."""
        stenosis = {}
        for spec in self.lesions:
            stenosis[spec.segment] = max(stenosis.get(spec.segment, 0.0), spec.percent)
        return cadrads_category(stenosis, plaque=bool(self.lesions))


def _pick(rng, pool, taken):
    free = [s for s in pool if s not in taken]
    choice = int(free[rng.integers(len(free))])
    taken.add(choice)
    return choice


def _lesions_for(pattern, rng):
    """Lesion specs (segment, percent, kind) realising ``pattern``."""
    taken = set()
    main = []  # (segment, percent) that set the category
    not_lm = tuple(s for s in _ALL if s != 5)
    if pattern == "1":
        main = [(_pick(rng, _ALL, taken), int(rng.integers(0, 25)))]
    elif pattern == "2":
        main = [(_pick(rng, _ALL, taken), int(rng.integers(25, 50)))]
    elif pattern == "3":
        main = [(_pick(rng, not_lm, taken), int(rng.integers(50, 70)))]
    elif pattern == "4A":
        territories = list(_TERRITORY_SEGMENTS)
        rng.shuffle(territories)
        for name in territories[: int(rng.integers(1, 3))]:
            main.append((_pick(rng, _TERRITORY_SEGMENTS[name], taken), int(rng.integers(70, 100))))
    elif pattern == "4B-LM":
        main = [(_pick(rng, (5,), taken), int(rng.integers(50, 100)))]
    elif pattern == "4B-3V":
        for pool in _TERRITORY_SEGMENTS.values():
            main.append((_pick(rng, pool, taken), int(rng.integers(70, 100))))
    elif pattern == "5":
        main = [(_pick(rng, _ALL, taken), 100)]
    # Milder extra lesions that cannot change the category: below the main band, and never a
    # left-main >= 50 % or a third territory >= 70 %.
    ceiling = {"0": 0, "1": 25, "2": 25, "3": 50, "4A": 50, "4B-LM": 70, "4B-3V": 70, "5": 70}
    extras = [] if pattern == "0" else [
        (_pick(rng, _ALL, taken), int(rng.integers(0, ceiling[pattern])))
        for _ in range(int(rng.integers(0, 3)))]
    return tuple(LesionSpec(segment, float(percent), KINDS[int(rng.integers(2))])
                 for segment, percent in main + extras)


def _check_count(count):
    if isinstance(count, bool) or not isinstance(count, numbers.Integral) or count < 1:
        raise InputError(f"count: expected a whole number of cases >= 1, got {count!r}")
    return int(count)


def plan_cohort(*, count, seed=0):
    """Plan a cohort without rendering anything.

    Parameters
    ----------
    count : int
        Number of cases.
    seed : int
        Cohort seed.

    Returns
    -------
    tuple of CohortEntry

    Examples
    --------
    >>> [entry.category for entry in plan_cohort(count=8, seed=0)]
    ['0', '1', '2', '3', '4A', '4B', '5', '4B']
    """
    count, seed = _check_count(count), check_seed(seed)
    entries = []
    for index in range(count):
        pattern = PATTERNS[index % len(PATTERNS)]
        rng = np.random.default_rng([seed, 99, index])
        case_seed = int(np.random.SeedSequence([seed, index]).generate_state(1)[0])
        entries.append(CohortEntry(index, f"case-{index:04d}", case_seed, pattern,
                                   _lesions_for(pattern, rng)))
    return tuple(entries)


def iter_cohort(*, count, seed=0, **options):
    """Yield the cohort's :class:`~explain.phantom.build.PhantomCase` objects one at a time.

    For training without disk; ``options`` go to :func:`~explain.phantom.build.make_phantom`.
    """
    for entry in plan_cohort(count=count, seed=seed):
        yield make_phantom(seed=entry.seed, lesions=entry.lesions, case_id=entry.case_id, **options)


def grade_segments(stenosis_percent, grade, lesion_segments=()):
    """Segments that set a CAD-RADS 2.0 grade (Cury et al. 2022), ascending.

    5: the occluded segments; 4B: the left main if >= 50 %, and every segment >= 70 % when all
    three territories have one; 4A: segments >= 70 %; 3: 50-69 %; 2: 25-49 %; 1: segments with
    a lesion (1-24 % or plaque without stenosis); 0: none.

    Examples
    --------
    >>> grade_segments({5: 52.0, 7: 62.0, 11: 42.0}, "4B")
    [5]
    """
    bands = {"5": (100, 101), "4A": (70, 100), "3": (50, 70), "2": (25, 50)}
    if grade == "4B":
        chosen = [s for s, v in stenosis_percent.items() if s == 5 and v >= 50]
        territories = {segment_info(s).territory for s, v in stenosis_percent.items() if v >= 70}
        if {"LAD", "LCx", "RCA"} <= territories:
            chosen += [s for s, v in stenosis_percent.items() if v >= 70 and s != 5]
        return sorted(set(chosen))
    if grade in bands:
        lo, hi = bands[grade]
        return sorted(s for s, v in stenosis_percent.items() if lo <= v < hi)
    if grade == "1":
        return sorted(set(lesion_segments))
    return []


def _row(entry, case):
    ref = case.reference
    worst = max(ref["stenosis_percent"].values())
    culprits = grade_segments(ref["stenosis_percent"], ref["grade"],
                              [p.segment for p in case.lesions])
    return {
        "case": f"{entry.case_id}/case.json",
        "case_id": entry.case_id,
        "grade": ref["grade"],
        "seed": entry.seed,
        "pattern": entry.pattern,
        "lesions": ";".join(p.summary() for p in case.lesions),
        "n_lesions": len(case.lesions),
        "max_stenosis_percent": f"{worst:g}",
        "grade_segments": ";".join(str(s) for s in culprits),
        "lesion_extents_mm": ";".join(f"{p.segment}:{p.start_mm:.2f}-{p.end_mm:.2f}"
                                      for p in case.lesions),
    }


def write_cohort(out_dir, *, count, seed=0, force=False, image_format="nifti", **options):
    """Write ``count`` phantom cases, one folder each, and ``cohort.csv`` listing them.

    Parameters
    ----------
    out_dir : str or Path
        The cohort folder to create (refused if not empty, unless ``force``).
    count : int
    seed : int
    force : bool
        Replace an existing non-empty ``out_dir`` once the new cohort is complete.
    image_format : {"nifti", "dicom"}
        Each case's CT as image.nii.gz or as a DICOM CT series (see
        :func:`~explain.phantom.writer.write_phantom_case`).
    **options
        Passed to :func:`~explain.phantom.build.make_phantom`.

    Returns
    -------
    Path
        ``out_dir / "cohort.csv"``, columns :data:`COHORT_COLUMNS`: ``case`` is the path of
        each ``case.json`` relative to the CSV's folder (``case-0000/case.json``); ``grade``
        the CAD-RADS 2.0 category; ``seed`` the case's own seed; ``pattern`` the planned
        pattern; ``lesions`` ``ID:PERCENT:kind`` joined by ``;`` (what ``--lesion`` reads);
        ``grade_segments`` the segments that set the grade (:func:`grade_segments`);
        ``lesion_extents_mm`` ``ID:start-end`` in arc mm.
    """
    out_dir = Path(out_dir)
    entries = plan_cohort(count=count, seed=seed)
    check_image_format(image_format)
    with atomic_output_dir(out_dir, force=force) as temp:
        buffer = io.StringIO()
        writer = csv.DictWriter(buffer, fieldnames=COHORT_COLUMNS, lineterminator="\n")
        writer.writeheader()
        for entry in entries:
            case = make_phantom(seed=entry.seed, lesions=entry.lesions, case_id=entry.case_id,
                                **options)
            folder = temp / entry.case_id
            folder.mkdir()
            write_case_files(case, folder, image_format=image_format)
            writer.writerow(_row(entry, case))
        write_text(buffer.getvalue(), temp / "cohort.csv")
    return out_dir / "cohort.csv"
