"""Integrated Gradients (Sundararajan, Taly, Yan 2017) through captum ``IntegratedGradients``.

The path runs from the constant ``baseline_hu`` patient to ``x`` with every segment moving at
once, on the whole model (a per-segment path would hold the other segments at ``x`` and measure
something else). The attributions sum to ``F(x) - F(baseline)`` up to the convergence delta.
"""

from __future__ import annotations

import torch
from captum.attr import IntegratedGradients

from ..errors import InputError
from .local import whole_model

__all__ = ["integrated_gradients"]


def integrated_gradients(
    wrapped, x, target, *, baseline_hu=0.0, steps=50, method="gausslegendre",
    internal_batch_size=None, return_convergence_delta=False,
):
    """Integrated Gradients from the constant ``baseline_hu`` to ``x``.

    Returns the map, or ``(map, delta)`` with ``return_convergence_delta=True`` (captum's
    convention: delta = sum of attributions - (F(x) - F(baseline)), one per patient).
    """
    if isinstance(steps, bool) or not isinstance(steps, int) or steps < 1:
        raise InputError(f"integrated_gradients steps: expected a positive integer, got {steps!r}")
    ig = IntegratedGradients(whole_model(wrapped, target))
    out = ig.attribute(
        x.clone(), baselines=float(baseline_hu), n_steps=steps, method=method,
        internal_batch_size=internal_batch_size or 8,
        return_convergence_delta=bool(return_convergence_delta),
    )
    if return_convergence_delta:
        return out[0].detach(), out[1].detach()
    return out.detach()
