"""Segment Shapley values: ours (exact, head only on 2^16 coalitions) vs captum ShapleyValueSampling.

16 segments of 32 cross-sections of 32 x 32 pixels; captum runs 25 permutations on the whole
model with one feature group per segment, the removed segments filled with the baseline (0 HU).
Last line: ``ratio=<speed-up>``. Run: ``.venv/bin/python bench/shapley.py``.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
import torch
from captum.attr import ShapleyValueSampling

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout

from explain.attribution import trace_segments
from explain.model import CrossSectionSpec, ReferenceNet, wrap_model

S, N, SIZE = 16, 32, 32


def main():
    torch.manual_seed(0)
    net = ReferenceNet(channels=4, features=16).eval()
    wrapped = wrap_model(net, spec=CrossSectionSpec(N, SIZE, 0.5))
    x = torch.randn(1, S, N, SIZE, SIZE) * 150.0 + 100.0
    target = 4

    t0 = time.perf_counter()
    tr = trace_segments(wrapped, x, target=target)
    t_ours = time.perf_counter() - t0

    mask = torch.arange(S).reshape(1, S, 1, 1, 1).expand_as(x).contiguous()
    t0 = time.perf_counter()
    with torch.no_grad():
        ref = ShapleyValueSampling(net).attribute(
            x, baselines=0.0, target=target, feature_mask=mask, n_samples=25,
            perturbations_per_eval=1,
        )
    t_ref = time.perf_counter() - t0
    ref_seg = ref[0, :, 0, 0, 0].double().numpy()
    with torch.no_grad():
        f_x = float(net(x)[0, target])
        f_0 = float(net(torch.zeros_like(x))[0, target])
    gap = abs(tr.shapley.sum() - (tr.value_all - tr.value_empty))
    print(f"input {tuple(x.shape)}, target column {target}, baseline 0 HU")
    print(f"ours exact (2^{S} coalitions) : {t_ours:8.3f} s, efficiency gap {gap:.2e}")
    print(f"captum 25 permutations        : {t_ref:8.3f} s, efficiency gap "
          f"{abs(ref_seg.sum() - (f_x - f_0)):.2e}")
    print(f"v(all) - v(empty) = {tr.value_all - tr.value_empty:.6g}; F(x) - F(baseline) = {f_x - f_0:.6g}")
    print(f"max |ours - captum estimate| = {np.abs(tr.shapley - ref_seg).max():.3g} "
          f"(max |phi| = {np.abs(tr.shapley).max():.3g}); culprit ours {tr.culprit}, "
          f"captum {int(np.argmax(ref_seg))}")
    print(f"ratio={t_ref / t_ours:.1f}")


if __name__ == "__main__":
    main()
