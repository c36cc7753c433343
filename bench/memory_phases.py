"""Where the memory of ``culprit-lens explain`` goes, phase by phase, on the full-size scan.

A probe, not a benchmark: it builds the case of ``bench/memory.py`` (the demo phantom in a
512 x 512 x 400 int16 field), then runs ``explain`` in a child process in which the main steps
are wrapped. A thread reads the resident set size (``/proc/self/statm``) every 10 ms; for each
step the child prints the RSS on entry, the highest RSS while it ran and the RSS on exit (MB),
nested steps indented. The last line is the child's own peak (``ru_maxrss``).

Run: ``nice -n 10 .venv/bin/python bench/memory_phases.py [--only-write]``.
"""

from __future__ import annotations

import functools
import importlib
import os
import resource
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

# (module, attribute) of each step wrapped; looked up where the caller finds it.
STEPS = [
    ("explain.cli", "load_case"), ("explain.case", "load_case"),
    ("explain.model", "load_model"),
    ("explain.report", "explain_case"),
    ("explain.geometry", "sample_case"),
    ("explain.attribution.budget", "batches_for_budget"),
    ("explain.attribution", "trace_segments"),
    ("explain.report.saliency", "_one_map"),
    ("explain.report.explanation", "_segment_results"),
    ("explain.quality", "assess"),
    ("explain.quality.assessment", "localisation"),
    ("explain.quality.localisation", "_mask_voxels_mm"),
    ("explain.quality.localisation", "_lesion_regions"),
    ("explain.quality.assessment", "faithfulness"),
    ("explain.report.explanation.Explanation", "write"),
    ("explain.report.files", "_write_overlay"),
    ("explain.report.files", "write_placed_nifti"),
    ("explain.report.files", "write_image"),
    ("explain.report.files", "write_attributions"),
    ("explain.report.files", "write_figures"),
    ("explain.report.files", "report_html"),
]

_PAGE = os.sysconf("SC_PAGE_SIZE")


class _Sampler(threading.Thread):
    def __init__(self):
        super().__init__(daemon=True)
        self.peak = 0

    @staticmethod
    def rss():
        with open("/proc/self/statm") as f:
            return int(f.read().split()[1]) * _PAGE

    def run(self):
        while True:
            self.peak = max(self.peak, self.rss())
            time.sleep(0.01)


def _child(argv):
    sampler = _Sampler()
    sampler.start()
    depth = [0]

    def wrap(name, fn):
        @functools.wraps(fn)
        def inner(*a, **k):
            before, saved = sampler.rss(), sampler.peak
            sampler.peak = before
            depth[0] += 1
            try:
                return fn(*a, **k)
            finally:
                depth[0] -= 1
                after = sampler.rss()
                peak = max(sampler.peak, after)
                print(f"{'  ' * depth[0]}{name:<40} in {before / 1e6:7.0f}  peak "
                      f"{peak / 1e6:7.0f}  out {after / 1e6:7.0f} MB", file=sys.stderr, flush=True)
                sampler.peak = max(saved, peak)
        return inner

    import explain.cli  # noqa: F401  (the modules the steps live in)
    for mod_name, attr in STEPS:
        parts = mod_name.split(".")
        try:
            owner = importlib.import_module(mod_name)
        except ModuleNotFoundError:
            owner = getattr(importlib.import_module(".".join(parts[:-1])), parts[-1])
        fn = getattr(owner, attr, None)
        if fn is not None:
            setattr(owner, attr, wrap(f"{mod_name.split('.')[-1]}.{attr}", fn))
    print(f"after imports: {sampler.rss() / 1e6:.0f} MB", file=sys.stderr, flush=True)
    from explain.cli import main
    try:
        main(argv)
    finally:
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
        print(f"peak (ru_maxrss): {peak / 1e6:.0f} MB", file=sys.stderr, flush=True)


def main():
    if sys.argv[1:2] == ["--child"]:
        return _child(sys.argv[2:])
    from bench.memory import full_size_case

    extra = sys.argv[1:]
    with tempfile.TemporaryDirectory(prefix="bench-phases-") as tmp:
        _, full = full_size_case(Path(tmp))
        cmd = [sys.executable, str(Path(__file__).resolve()), "--child", "explain", "--case",
               str(full), "--model", "builtin:reference", "--out", str(Path(tmp) / "out"),
               "--quiet", *extra]
        subprocess.run(cmd, check=True, env={**os.environ, "PYTHONPATH": str(ROOT)})


if __name__ == "__main__":
    main()
