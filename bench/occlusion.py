"""Occlusion: ours (segment-local, one segment encoded per window) vs captum Occlusion on the whole model.

16 segments, 32 cross-sections of 32 x 32 pixels, window 4 x 8 x 8 with the same stride, the
same model and target, run side by side in one process. Last line: ``ratio=<speed-up>``.
Run: ``.venv/bin/python bench/occlusion.py``.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import torch
from captum.attr import Occlusion

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout

from explain.attribution import attribute
from explain.model import CrossSectionSpec, ReferenceNet, wrap_model

S, N, SIZE = 16, 32, 32
WINDOW = (4, 8, 8)
BATCH = 32


def main():
    torch.manual_seed(0)
    torch.set_num_threads(max(1, torch.get_num_threads()))
    net = ReferenceNet(channels=4, features=16).eval()
    wrapped = wrap_model(net, spec=CrossSectionSpec(N, SIZE, 0.5))
    x = torch.randn(1, S, N, SIZE, SIZE) * 150.0 + 100.0
    target = 4

    t0 = time.perf_counter()
    ours = attribute(wrapped, x, method="occlusion", target=target, window=WINDOW,
                     internal_batch_size=BATCH)
    t_ours = time.perf_counter() - t0

    t0 = time.perf_counter()
    with torch.no_grad():
        ref = Occlusion(net).attribute(
            x, sliding_window_shapes=(1,) + WINDOW, strides=(1,) + WINDOW, baselines=0.0,
            target=target, perturbations_per_eval=max(1, BATCH // S),
        )
    t_ref = time.perf_counter() - t0
    diff = float((ours - ref).abs().max())
    scale = float(ref.abs().max())
    print(f"input {tuple(x.shape)}, window {WINDOW}, stride {WINDOW}, target column {target}")
    print(f"ours (segment-local) : {t_ours:8.2f} s")
    print(f"captum whole model   : {t_ref:8.2f} s")
    print(f"max |difference| = {diff:.3g} (max |map| = {scale:.3g}); same maps: {diff <= 1e-5 + 1e-5 * scale}")
    print(f"ratio={t_ref / t_ours:.1f}")


if __name__ == "__main__":
    main()
