"""What the quality assessment adds to ``explain`` on the demo case, in one process.

The demo's phantom case (seed 0, its lesion) and the bundled reference model with the default
methods: ``explain_case(..., quality=False)`` against ``explain.quality.assess`` (with the model:
localisation, mass shares, flags and the faithfulness curves; and without it, which skips the
curves). Last line: ``ratio=<assess time / explain time>``.
Run: ``.venv/bin/python bench/quality.py``.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout

from explain.case import load_case
from explain.model import load_model
from explain.phantom import write_phantom_case
from explain.quality import assess
from explain.report import explain_case
from explain.report.demo import DEMO_LESIONS


def main():
    with tempfile.TemporaryDirectory() as folder:
        case = load_case(write_phantom_case(Path(folder) / "case", seed=0,
                                            lesions=list(DEMO_LESIONS)))
    model = load_model("builtin:reference")
    t0 = time.perf_counter()
    explanation = explain_case(model, case, seed=0, quality=False)
    t_explain = time.perf_counter() - t0
    t0 = time.perf_counter()
    assess(explanation, case, model=model)
    t_quality = time.perf_counter() - t0
    t0 = time.perf_counter()
    assess(explanation, case)
    t_cheap = time.perf_counter() - t0
    print(f"explain (default methods, no quality): {t_explain:.2f} s")
    print(f"assess with the model (faithfulness curves included): {t_quality:.2f} s")
    print(f"assess without the model (no curves): {t_cheap:.2f} s")
    print(f"ratio={t_quality / t_explain:.3f}")


if __name__ == "__main__":
    main()
