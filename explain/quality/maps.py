"""Recompute saliency maps for the sanity and stability checks, the way a report computes them.

The checks recompute each method's map many times (once per randomised layer, once per
augmentation); this runs :func:`explain.attribution.attribute` with the same options each time
and seeds torch before every method, as :func:`explain.report.explain_case` does, so that a
sampled method (SmoothGrad) draws the same noise in every run and only the model or the input
differs.
"""

from __future__ import annotations

import numpy as np
import torch

from ..attribution import attribute

__all__ = ["saliency_maps"]


def saliency_maps(model, x, *, methods, target, method_options=None, baseline_hu=0.0, seed=0):
    """Each method's map of ``target`` for one patient.

    Parameters
    ----------
    model : WrappedModel
    x : (1, S, N, H, W) float32 tensor, HU
    methods : sequence of str
        Names from :data:`explain.attribution.METHODS`.
    target : Target or int or str
        Fixed once for the unaugmented, unrandomised model and passed again unchanged, so that
        every map answers the same question.
    method_options : dict of str to dict, optional
        Options per method (e.g. ``{"integrated_gradients": {"steps": 50}}``).
    baseline_hu : float
    seed : int
        ``torch.manual_seed(seed)`` before each method.

    Returns
    -------
    dict of str to (S, N, H, W) float32 ndarray
    """
    options = method_options or {}
    maps = {}
    for method in methods:
        torch.manual_seed(seed)
        result = attribute(model, x, method=method, target=target, baseline_hu=baseline_hu,
                           **options.get(method, {}))
        maps[method] = result.detach().cpu().numpy()[0].astype(np.float32)
    return maps
