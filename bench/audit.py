"""Cohort audit throughput: 1 vs 2 local workers, and a 2-worker Dask LocalCluster.

16 phantom cases are built once in a temp folder; each configuration audits them into a fresh
folder with the bundled reference model. Peak memory per worker is the largest resident set size
(psutil, sampled every 0.1 s) of any worker process of that configuration. The reference for the
ratio is the one-worker run in this same process. Last line: ``ratio=<speed-up of 2 local workers
over 1>`` (the aim is 1.6 or more on two cores).

Run: ``.venv/bin/python bench/audit.py [--methods gradient,integrated_gradients] [--count 16]``.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import threading
import time
from pathlib import Path

import psutil

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout

from explain.audit import run_audit
from explain.phantom import write_cohort


class PeakMemory:
    """Largest RSS in MB of any descendant process (the workers) while the block runs."""

    def __init__(self):
        self.peak_mb, self._stop = 0.0, threading.Event()

    def _poll(self):
        me = psutil.Process()
        while not self._stop.is_set():
            for child in me.children(recursive=True):
                try:
                    self.peak_mb = max(self.peak_mb, child.memory_info().rss / 2**20)
                except psutil.Error:
                    pass
            time.sleep(0.1)

    def __enter__(self):
        self._thread = threading.Thread(target=self._poll, daemon=True)
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()


def _timed(label, count, run):
    with PeakMemory() as mem:
        t0 = time.perf_counter()
        run()
        seconds = time.perf_counter() - t0
    rate = count / seconds * 60.0
    print(f"{label:<28} {seconds:7.1f} s  {rate:6.2f} cases/min  peak/worker {mem.peak_mb:7.0f} MB")
    return seconds


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--count", type=int, default=16)
    parser.add_argument("--methods", default="gradient,integrated_gradients")
    args = parser.parse_args(argv)
    methods = args.methods.split(",")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        cohort = write_cohort(tmp / "cohort", count=args.count, seed=5)
        print(f"{args.count} phantom cases; methods {','.join(methods)}; {os.cpu_count()} CPUs")
        opts = dict(methods=methods, seed=0, quiet=True)
        one = _timed("1 local worker", args.count,
                     lambda: run_audit(cohort, "builtin:reference", tmp / "w1", workers=1, **opts))
        two = _timed("2 local workers", args.count,
                     lambda: run_audit(cohort, "builtin:reference", tmp / "w2", workers=2, **opts))
        try:
            import distributed
        except ImportError:  # pragma: no cover - dask is a dependency
            print("dask: not installed, skipped")
        else:
            def dask_run():
                with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                              dashboard_address=None, host="127.0.0.1") as cl, \
                        distributed.Client(cl) as client:
                    run_audit(cohort, "builtin:reference", tmp / "dask", scheduler=client, **opts)
            _timed("2-worker Dask LocalCluster", args.count, dask_run)
    print(f"ratio={one / two:.2f}")


if __name__ == "__main__":
    main()
