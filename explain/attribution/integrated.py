"""Integrated Gradients (Sundararajan, Taly, Yan 2017) through captum ``IntegratedGradients``.

The path runs from the constant ``baseline_hu`` patient to ``x`` with every segment moving at
once, on the whole model (a per-segment path would hold the other segments at ``x`` and measure
something else). The attributions sum to ``F(x) - F(baseline)`` up to the convergence delta
(completeness, Sundararajan et al. 2017, Proposition 1); :func:`completeness_finding` turns a gap
above :data:`COMPLETENESS_SHARE` of ``|F(x) - F(baseline)|`` into a warning.
"""

from __future__ import annotations

from captum.attr import IntegratedGradients

from ..errors import InputError
from .local import whole_model

__all__ = ["COMPLETENESS_SHARE", "completeness_finding", "integrated_gradients"]

#: Largest completeness gap, as a share of ``|F(x) - F(baseline)|``, reported as a note rather
#: than a warning. Sundararajan, Taly and Yan (2017, section 4) advise enough steps for the
#: attributions to sum to within 5 % of the difference (from memory).
COMPLETENESS_SHARE = 0.05


def completeness_finding(total, delta, *, share=COMPLETENESS_SHARE):
    """The completeness gap of one Integrated Gradients map as ``(text, is_warning)``.

    Parameters
    ----------
    total : float
        Sum of the attributions, target units.
    delta : float
        captum's convergence delta, ``total - (F(x) - F(baseline))``, target units.
    share : float
        Gap, as a share of ``|F(x) - F(baseline)|``, above which the text is a warning.

    Returns
    -------
    text : str
    is_warning : bool

    Examples
    --------
    >>> completeness_finding(1.02, 0.02)[1], completeness_finding(1.2, 0.2)[1]
    (False, True)
    """
    change = float(total) - float(delta)  # F(x) - F(baseline)
    gap = abs(float(delta))
    relative = gap / abs(change) if change != 0 else (0.0 if gap == 0 else float("inf"))
    text = (f"integrated_gradients: completeness gap (convergence delta) {float(delta):.3g} "
            f"target units, {100 * relative:.3g} % of |F(x) - F(baseline)| = {abs(change):.3g}")
    if relative > share:
        return (text + f"; above {100 * share:g} %: the map does not account for the whole "
                "change of the target; use more steps before reading it"), True
    return text, False


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
