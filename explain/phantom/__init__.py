"""Synthetic coronary CT angiography cases (our own phantoms, not patient data).

A phantom is a coronary-like tree of SCCT 2014 segments drawn as curved tubes in fat on a
myocardium-like sphere, with lumen, fat, myocardium and plaque at published attenuations, a
partial-volume blur and seeded noise; lesions narrow the lumen by a given diameter stenosis.
Everything follows from a seed.

Public names
------------
make_phantom, PhantomCase
    build.py: one case in memory (SimpleITK image, centerlines, reference, lesion mask).
write_phantom_case
    writer.py: one case folder (case.json, image.nii.gz, centerlines/seg<ID>.csv, lesion mask);
    with ``image_format="dicom"`` the CT as a DICOM series (dicom_writer.py, invented identifiers).
LesionSpec, parse_lesion, PlacedLesion
    lesions.py: a lesion to draw (``"ID:PERCENT[:calcified|soft]"``) and where it ended up.
plan_cohort, iter_cohort, write_cohort, CohortEntry
    cohort.py: cases spanning every CAD-RADS 2.0 category, and the cohort CSV.
make_layout, TreeLayout
    layout.py: the tree alone.
"""

from __future__ import annotations

from .build import PhantomCase, make_phantom
from .cohort import CohortEntry, iter_cohort, plan_cohort, write_cohort
from .layout import TreeLayout, make_layout
from .lesions import LesionSpec, PlacedLesion, parse_lesion
from .writer import case_manifest, write_phantom_case

__all__ = [
    "CohortEntry",
    "LesionSpec",
    "PhantomCase",
    "PlacedLesion",
    "TreeLayout",
    "case_manifest",
    "iter_cohort",
    "make_layout",
    "make_phantom",
    "parse_lesion",
    "plan_cohort",
    "write_cohort",
    "write_phantom_case",
]
