"""DICOM output: the time writing overlays/dicom/ adds, next to computing the saliency maps.

The demo phantom (seed 0, its lesion, 0.45 mm voxels) written as a DICOM series and explained
with the bundled reference model and the default methods; in one process: the saliency maps
(every method of ``explain_case``, alone), the overlays (computed once, shared), and
``write_dicom`` (a Parametric Map per method and the Segmentation). The first ``write_dicom``
call also pays for importing highdicom and loading its standard tables; both calls are shown.
Last line: ``ratio=<DICOM seconds / saliency seconds>``.
Run: ``.venv/bin/python bench/dicom.py [--methods gradient,...]``.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout

from explain.case import load_case
from explain.model import load_model
from explain.phantom import write_phantom_case
from explain.model.targets import resolve_target
from explain.report import DEFAULT_METHODS, explain_case, write_dicom
from explain.report.demo import DEMO_LESIONS
from explain.report.explanation import _saliency_maps
from explain.report.files import overlay_volumes


def _saliency_seconds(model, case, methods, explanation):
    """Time the saliency maps alone, as explain_case computes them."""
    import torch

    x = explanation.sections.tensor()
    with torch.no_grad():
        output = model.forward(x)
    target = resolve_target(output, "auto", grade_labels=model.grade_labels)
    t0 = time.perf_counter()
    _saliency_maps(model, x, methods, target, explanation.sections.values.shape[1:],
                   baseline_hu=0.0, seed=0, progress=None, notes=[])
    return time.perf_counter() - t0


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--methods", default=",".join(DEFAULT_METHODS))
    methods = tuple(parser.parse_args().methods.split(","))
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        manifest = write_phantom_case(tmp / "case", seed=0, lesions=list(DEMO_LESIONS),
                                      image_format="dicom")
        case = load_case(manifest)
        model = load_model("builtin:reference")
        explanation = explain_case(model, case, methods=methods, seed=0)
        t_maps = _saliency_seconds(model, case, methods, explanation)
        t0 = time.perf_counter()
        volumes = overlay_volumes(explanation)
        t_overlays = time.perf_counter() - t0
        first = write_dicom(explanation, case, tmp / "out1", volumes=volumes)
        second = write_dicom(explanation, case, tmp / "out2", volumes=volumes)
        size = sum((tmp / "out2" / name).stat().st_size for name in second.files)
    print(f"CT {case.image.GetSize()} voxels, methods {', '.join(methods)}")
    print(f"saliency maps          : {t_maps:8.2f} s")
    print(f"overlays (NIfTI grid)  : {t_overlays:8.2f} s (shared with the NIfTI files)")
    print(f"write_dicom, first call: {first.seconds:8.2f} s (imports and standard tables)")
    print(f"write_dicom, again     : {second.seconds:8.2f} s, {len(second.files)} objects, "
          f"{size / 1e6:.1f} MB")
    print(f"ratio={first.seconds / t_maps:.3f}")


if __name__ == "__main__":
    main()
