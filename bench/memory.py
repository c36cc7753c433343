"""Peak memory of ``culprit-lens explain`` on a full-size scan, and with a 3-D CNN encoder.

Case 1 (the ratio): the demo phantom (seed 0, a 70 % soft plaque in the mid LAD, all 16
segments) embedded in a 512 x 512 x 400 int16 field with the same spacing and the same
centerlines (their physical positions stay put, the origin moves), the lesion mask embedded
likewise. ``explain`` runs in a subprocess with the bundled reference model and the default
methods; its peak resident set size is the child's own ``ru_maxrss`` (``os.wait4``), so
nothing this script holds counts. The scan's float32 size is 512 * 512 * 400 * 4 bytes.

Case 2: the same phantom at the demo's own size explained with ``bench/cnn_encoder.py``, a
3-D CNN encoder of about 425 k parameters: peak and time.

Prints the peak, the scan's float32 size and the time of each case, the last line
``ratio=<peak / float32 scan size>`` of case 1 (the aim is 3 or less).

Run: ``nice -n 10 .venv/bin/python bench/memory.py [--memory-budget-gb 1.0] [--only full|cnn]``.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import SimpleITK as sitk

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))  # run from a checkout

from explain.phantom import write_phantom_case  # noqa: E402
from explain.report.demo import DEMO_LESIONS  # noqa: E402

FULL_SIZE = (512, 512, 400)  # i, j, k voxels, as a scanner writes a coronary CTA


def _embed(image, size, fill):
    """``image`` centred in a field of ``size`` voxels (same spacing and direction), int16."""
    small = sitk.GetArrayFromImage(image)
    big = np.full(size[::-1], fill, dtype=small.dtype)
    start = [(b - s) // 2 for b, s in zip(size[::-1], small.shape)]
    big[tuple(slice(a, a + n) for a, n in zip(start, small.shape))] = small
    out = sitk.GetImageFromArray(big)
    shift = np.asarray(start[::-1], dtype=np.float64)  # i, j, k voxels
    direction = np.asarray(image.GetDirection()).reshape(3, 3)
    origin = np.asarray(image.GetOrigin()) - direction @ (shift * np.asarray(image.GetSpacing()))
    out.SetOrigin(tuple(origin))
    out.SetSpacing(image.GetSpacing())
    out.SetDirection(image.GetDirection())
    return out


def full_size_case(folder):
    """Write the demo phantom embedded in a 512 x 512 x 400 int16 field; return case.json."""
    manifest = write_phantom_case(folder / "demo", seed=0, lesions=list(DEMO_LESIONS))
    case_dir = manifest.parent
    data = json.loads(manifest.read_text())
    image = sitk.ReadImage(str(case_dir / data["image"]))
    air = int(sitk.GetArrayViewFromImage(image).min())
    sitk.WriteImage(_embed(sitk.Cast(image, sitk.sitkInt16), FULL_SIZE, air),
                    str(case_dir / "full.nii.gz"), True)
    mask = sitk.ReadImage(str(case_dir / data["reference"]["lesion_mask"]))
    sitk.WriteImage(_embed(sitk.Cast(mask, sitk.sitkUInt8), FULL_SIZE, 0),
                    str(case_dir / "full_mask.nii.gz"), True)
    data["image"] = "full.nii.gz"
    data["reference"]["lesion_mask"] = "full_mask.nii.gz"
    data["case_id"] = "full-size"
    full = case_dir / "full.json"
    full.write_text(json.dumps(data, indent=2))
    return manifest, full


def run_explain(case, model, out, extra=()):
    """Run ``culprit-lens explain`` in a child process; return (peak RSS bytes, seconds)."""
    cmd = [sys.executable, "-m", "explain.cli", "explain", "--case", str(case), "--model", model,
           "--out", str(out), "--quiet", *extra]
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(proc.pid, 0)
    seconds = time.perf_counter() - t0
    proc.returncode = os.waitstatus_to_exitcode(status)
    err = proc.stderr.read().decode()
    proc.stderr.close()
    if proc.returncode != 0:
        raise SystemExit(f"explain failed ({proc.returncode}): {err.strip()}")
    return usage.ru_maxrss * 1024, seconds  # ru_maxrss is in KiB on Linux


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--memory-budget-gb", type=float, default=None,
                        help="passed to explain (default: explain's own default)")
    parser.add_argument("--only", choices=("full", "cnn"), default=None)
    args = parser.parse_args(argv)
    extra = () if args.memory_budget_gb is None else (
        "--memory-budget-gb", str(args.memory_budget_gb))
    gb = 1e9
    with tempfile.TemporaryDirectory(prefix="bench-memory-") as tmp:
        tmp = Path(tmp)
        demo, full = full_size_case(tmp)
        scan = int(np.prod(FULL_SIZE)) * 4
        ratio = None
        if args.only in (None, "cnn"):
            model = f"{ROOT / 'bench' / 'cnn_encoder.py'}:build"
            peak, seconds = run_explain(demo, model, tmp / "out-cnn", extra)
            size = sitk.ReadImage(str(demo.parent / "image.nii.gz")).GetSize()
            print(f"3-D CNN encoder (432 k parameters), demo-size phantom {size}: "
                  f"peak {peak / gb:.2f} GB, time {seconds:.1f} s")
        if args.only in (None, "full"):
            peak, seconds = run_explain(full, "builtin:reference", tmp / "out-full", extra)
            ratio = peak / scan
            print(f"full-size scan {FULL_SIZE} int16, reference model, default methods: "
                  f"peak {peak / gb:.2f} GB, scan float32 {scan / gb:.3f} GB, time {seconds:.1f} s")
        if ratio is not None:
            print(f"ratio={ratio:.2f}")


if __name__ == "__main__":
    main()
