"""Per-patient reports: explain one case and write what a reader opens.

Public names
------------
explain_case, Explanation, SegmentResult, DEFAULT_METHODS
    explanation.py: run every step on one case; the result and its ``write``.
run_demo
    demo.py: a phantom case explained with the bundled reference model.
check_out_dir
    files.py: refuse a non-empty output folder before any work (the CLI calls it first).
run_sanity, SanityCheck
    sanity_run.py: the randomisation and stability checks of one case (docs/sanity.md);
    sanity_page.py writes sanity.json, sanity.png and sanity.html.
write_dicom, DicomOutput
    dicom.py: the DICOM objects of a DICOM case (parametric maps, segmentation) in
    overlays/dicom/; dicom_regions.py: the segmentation's masks and segment descriptions.

Files written (docs/report-format.md): report.json (jsonout.py), segments.csv (tables.py),
attributions.npz and overlays (files.py), overlays/dicom/ (dicom.py), figures/*.png
(figures.py), report.html (html.py).
"""

from __future__ import annotations

from .explanation import DEFAULT_METHODS, Explanation, SegmentResult, explain_case
from .dicom import DicomOutput, write_dicom
from .files import check_out_dir

__all__ = ["DEFAULT_METHODS", "DicomOutput", "Explanation", "SanityCheck", "SegmentResult",
           "check_out_dir", "explain_case", "run_demo", "run_sanity", "write_dicom"]


def __getattr__(name):
    if name == "run_demo":
        from .demo import run_demo

        return run_demo
    if name in ("run_sanity", "SanityCheck"):
        from . import sanity_run

        return getattr(sanity_run, name)
    raise AttributeError(f"module 'explain.report' has no attribute {name!r}")
