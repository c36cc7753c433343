"""The demo: a synthetic phantom case explained with the bundled reference model.

``run_demo(out_dir)`` writes

- ``out_dir/case/``: the phantom case (case.json, the CT volume, the centerline CSVs, the
  lesion mask), made from ``seed``;
- ``out_dir/``: the explanation of that case (report.json, segments.csv, attributions.npz,
  overlays/, figures/, report.html), as :meth:`Explanation.write` writes it.

Everything is built in a folder beside ``out_dir`` and moved into place at the end.
"""

from __future__ import annotations

import dataclasses
import sys
from pathlib import Path

from .wording import culprit_summary, verdict

__all__ = ["DEMO_LESIONS", "progress_printer", "run_demo"]

#: The demo's lesion: a 70 % soft plaque in the mid LAD (CAD-RADS 4A).
DEMO_LESIONS = ("7:70:soft",)


def progress_printer(quiet):
    """A callable printing one indented progress line to stderr, or None when ``quiet``."""
    if quiet:
        return None

    def say(message):
        print(f"  {message}", file=sys.stderr, flush=True)

    return say


def run_demo(out_dir, *, seed=0, force=False, quiet=False, methods=None, image_format="nifti",
             dicom=True):
    """Make a phantom case, explain it with ``builtin:reference`` and write the report.

    Parameters
    ----------
    out_dir : str or Path
        Output folder; refused if it exists and is not empty, unless ``force``.
    seed : int
        Seed of the phantom and of every sampled step.
    force : bool
        Replace a non-empty ``out_dir`` (only once the new one is complete).
    quiet : bool
        No progress messages and no summary (progress goes to stderr, the summary to stdout).
    methods : sequence of str, optional
        Saliency methods; default :data:`explain.report.DEFAULT_METHODS`.
    image_format : {"nifti", "dicom"}
        The phantom's CT as NIfTI, or as a DICOM CT series: then the explanation also has its
        DICOM objects in ``overlays/dicom/`` (unless ``dicom`` is false).
    dicom : bool
        Write the DICOM objects of a DICOM case.

    Returns
    -------
    Path
        ``out_dir / "report.html"``.
    """
    from ..case import load_case
    from ..io import atomic_output_dir
    from ..model import load_model
    from ..phantom import write_phantom_case
    from .explanation import explain_case
    from .files import write_into

    out_dir = Path(out_dir)
    say = progress_printer(quiet)
    with atomic_output_dir(out_dir, force=force) as staging:
        if say:
            say(f"making phantom case (seed {seed}, lesion {', '.join(DEMO_LESIONS)})")
        manifest = write_phantom_case(staging / "case", seed=seed, lesions=list(DEMO_LESIONS),
                                      image_format=image_format)
        case = load_case(manifest)
        # The report names the case where it will be, not where it was built.
        case = dataclasses.replace(case, path=out_dir / "case" / "case.json")
        if say:
            say("loading the bundled reference model")
        model = load_model("builtin:reference")
        explanation = explain_case(model, case, methods=methods, seed=seed, progress=say)
        write_into(explanation, staging, progress=say, dicom=dicom)
    if not quiet:
        _summary(explanation)
    return out_dir / "report.html"


def _summary(explanation):
    e = explanation
    c = e.culprit
    print(f"case {e.case_id}: {verdict(e.prediction)} "
          f"Reference grade given with the case: {getattr(e.case.reference, 'grade', None)}.")
    print(f"culprit segment {c.label}, {c.name}: Shapley {c.shapley:.3g}, margin {e.margin:.3g}")
    print(culprit_summary(e))
    for method in e.methods:
        peak = c.locations[method].peak
        where = "no attribution to locate" if peak is None else (
            f"peak {peak.arc_mm:.1f} mm from the segment's start, voxel {peak.voxel}")
        print(f"  {method}: {where}")
