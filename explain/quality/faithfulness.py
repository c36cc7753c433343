"""Faithfulness: does removing what the explanation ranks first change the target most?

Two levels, both against seeded random orders:

- **Segments.** Remove segments from the max-pooled patient in order of Shapley value, largest
  first (a removed segment counts as the baseline segment, cross-sections filled with
  ``baseline_hu``), and insert them into the empty patient in the same order. The value
  function is the segment trace's ``v`` (:mod:`explain.attribution.trace`) on the segment
  features, computed once: the curves cost only head runs.
- **Cross-sections of the culprit.** Delete pixels (set them to ``baseline_hu``) in order of the
  map, in ``section_steps`` equal steps up to ``section_fraction`` of the segment's pixels, and
  insert them into the culprit filled with ``baseline_hu`` (Petsiuk, Das, Saenko 2018, RISE:
  deletion and insertion). Only the culprit is re-encoded; the other segments' features stay.

Curves are recorded in target units; areas under them use ``(v - v(none)) / (v(all) - v(none))``
(1 for the whole patient, 0 for no segment) over an x axis from 0 to 1 (segments removed over
S, or steps over ``section_steps``), by the trapezoid rule. They can leave [0, 1] when a removal
raises the target. A faithful explanation has a deletion area below the random one and an
insertion area above it.
"""

from __future__ import annotations

import numpy as np
import torch

from ..attribution._common import baseline_features, fixed_target, head_values
from .regions import attribution_for, method_aggregate

__all__ = ["curve_auc", "order_curves", "segment_faithfulness", "section_faithfulness",
           "faithfulness"]

_HEAD_BATCH = 4096
_ENCODE_BATCH = 16


def curve_auc(values, value_all, value_none):
    """Area under a curve sampled at equal steps on [0, 1], normalised by ``v(all) - v(none)``.

    Returns None when ``v(all) = v(none)`` (nothing to normalise by).

    Examples
    --------
    >>> curve_auc([4.0, 1.0, 0.5, 0.0], 4.0, 0.0)   # (1 + .25)/2 + (.25 + .125)/2 + .125/2, /3
    0.2916666666666667
    """
    span = float(value_all) - float(value_none)
    if abs(span) <= 1e-12 * max(1.0, abs(float(value_all))):
        return None
    v = (np.asarray(values, dtype=np.float64) - float(value_none)) / span
    return float((v[:-1] + v[1:]).sum() / (2 * (v.size - 1)))


def order_curves(feats, base, order):
    """Pooled features after each removal (deletion) and each insertion, in ``order``.

    Parameters
    ----------
    feats : (S, C) tensor
    base : (C,) tensor
        Baseline segment features, always in the max.
    order : (S,) int
        Segment indices, first removed (or inserted) first.

    Returns
    -------
    deletion, insertion : (S + 1, C) tensors
        Row k: the max over the segments left after k removals / inserted after k insertions.
    """
    stack = feats[torch.as_tensor(np.asarray(order, dtype=np.int64))]
    grown = torch.maximum(torch.cummax(stack, dim=0).values, base)
    insertion = torch.cat([base[None], grown])
    shrunk = torch.maximum(torch.cummax(stack.flip(0), dim=0).values.flip(0), base)
    deletion = torch.cat([shrunk, base[None]])
    return deletion, insertion


def _summary(curves, random_curves, value_all, value_none):
    out = {}
    for kind in ("deletion", "insertion"):
        auc = curve_auc(curves[kind], value_all, value_none)
        rand = [curve_auc(c, value_all, value_none) for c in random_curves[kind]]
        rand_auc = None if auc is None else float(np.mean(rand))
        out[kind] = [float(v) for v in curves[kind]]
        out[f"random_{kind}"] = [float(v) for v in np.mean(random_curves[kind], axis=0)]
        out[f"{kind}_auc"] = auc
        out[f"random_{kind}_auc"] = rand_auc
        out[f"{kind}_minus_random"] = None if auc is None else auc - rand_auc
    return out


def segment_faithfulness(value_head, feats, base, shapley, *, random_orders, seed):
    """Segment deletion and insertion curves, in Shapley order and in random orders.

    Parameters
    ----------
    value_head : callable
        ``pooled (M, C) -> (M,)`` float64 target values.
    feats : (S, C) tensor
    base : (C,) tensor
    shapley : (S,) float
    random_orders, seed : int
        Random orders drawn from ``numpy.random.default_rng(seed)``.

    Returns
    -------
    dict
        ``order`` (segment indices), ``deletion``, ``insertion`` (S + 1 values, target units),
        ``random_deletion``, ``random_insertion`` (mean curves), their areas
        (``deletion_auc``, ``random_deletion_auc``, ``deletion_minus_random``, likewise for
        insertion), ``value_all``, ``value_none``.
    """
    s = feats.shape[0]
    order = np.argsort(-np.asarray(shapley, dtype=np.float64), kind="stable")
    rng = np.random.default_rng(seed)
    orders = [order] + [rng.permutation(s) for _ in range(random_orders)]
    rows = []
    for o in orders:
        rows.extend(order_curves(feats, base, o))
    values = value_head(torch.cat(rows)).reshape(len(orders), 2, s + 1)
    value_all, value_none = float(values[0, 0, 0]), float(values[0, 1, 0])
    curves = {"deletion": values[0, 0], "insertion": values[0, 1]}
    random_curves = {"deletion": values[1:, 0], "insertion": values[1:, 1]}
    out = {"order": [int(i) for i in order], "value_all": value_all, "value_none": value_none}
    out.update(_summary(curves, random_curves, value_all, value_none))
    return out


def _counts(n_pixels, steps, fraction):
    return [int(round(k / steps * fraction * n_pixels)) for k in range(steps + 1)]


def _variants(original, order, counts, baseline_hu):
    """Deletion and insertion variants ``(2 * len(counts), N, H, W)`` of one segment."""
    flat = original.reshape(-1)
    out = []
    for inserting in (False, True):
        for count in counts:
            chosen = torch.as_tensor(order[:count], dtype=torch.int64)
            if inserting:
                v = torch.full_like(flat, baseline_hu)
                v[chosen] = flat[chosen]
            else:
                v = flat.clone()
                v[chosen] = baseline_hu
            out.append(v.reshape(original.shape))
    return torch.stack(out)


def section_faithfulness(segment_value, original, maps, *, steps, fraction, baseline_hu,
                         random_orders, seed, value_all, value_none):
    """Pixel deletion and insertion curves on one segment (Petsiuk et al. 2018).

    Parameters
    ----------
    segment_value : callable
        ``(M, N, H, W) HU tensor -> (M,)`` float64 target values, the other segments fixed.
    original : (N, H, W) tensor, HU
    maps : dict of str to (N, H, W) array
        Non-negative scores per method; pixels go largest first (stable order on ties).
    steps, fraction : int, float
        Step k deletes ``round(k / steps * fraction * N H W)`` pixels.
    baseline_hu : float
    random_orders, seed : int
    value_all, value_none : float
        For the areas' normalisation.

    Returns
    -------
    dict
        ``fraction_deleted`` (per step), ``random`` (mean random curves and areas), and per
        method the curves and areas as in :func:`segment_faithfulness`.
    """
    n = original.numel()
    counts = _counts(n, steps, fraction)
    k = len(counts)

    def curves(order):
        v = segment_value(_variants(original, order, counts, baseline_hu))
        return {"deletion": v[:k], "insertion": v[k:]}

    rng = np.random.default_rng(seed)
    random = [curves(rng.permutation(n)) for _ in range(random_orders)]
    random_curves = {kind: np.stack([r[kind] for r in random]) for kind in ("deletion", "insertion")}
    out = {"fraction_deleted": [c / n for c in counts], "methods": {}}
    for method, score in maps.items():
        order = np.argsort(-np.asarray(score, dtype=np.float64).reshape(-1), kind="stable")
        out["methods"][method] = _summary(curves(order), random_curves, value_all, value_none)
    return out


def _segment_value(model, target, others):
    def value(batch):
        out = []
        with torch.no_grad():
            for start in range(0, batch.shape[0], _ENCODE_BATCH):
                own = model.encode(batch[start:start + _ENCODE_BATCH, None])[:, 0]
                out.append(target(model.head(torch.maximum(own, others))).double())
        return torch.cat(out).numpy()

    return value


def faithfulness(explanation, model, *, target=None, settings):
    """Both levels for one explanation.

    The model runs its encoder once over the patient and
    ``2 x (methods + section_random_orders) x (section_steps + 1)`` times over the culprit alone.

    Parameters
    ----------
    explanation : explain.report.Explanation
    model : explain.model.WrappedModel
        The model that was explained.
    target : explain.model.targets.Target, optional
        Default: the explanation's resolved target label, fixed at this patient.
    settings : explain.quality.settings.QualitySettings

    Returns
    -------
    dict
        ``segments`` (:func:`segment_faithfulness`, with ``order`` as SCCT ids) and
        ``culprit_cross_sections`` (:func:`section_faithfulness`).
    """
    e = explanation
    x = e.sections.tensor()
    baseline_hu = float(e.settings.get("baseline_hu", 0.0))
    seed = int(e.settings.get("seed", 0))
    with torch.no_grad():
        feats = model.encode(x).detach()
    tgt = fixed_target(model, x, e.target["label"] if target is None else target, feats=feats)
    feats = feats[0]
    base = baseline_features(model, x, baseline_hu)
    shapley = [s.shapley for s in e.segments]
    seg = segment_faithfulness(lambda p: head_values(model, tgt, p, batch=_HEAD_BATCH), feats,
                               base, shapley, random_orders=settings.random_orders, seed=seed)
    seg["order"] = [int(e.sections.segment_ids[i]) for i in seg["order"]]
    c = e.culprit_index
    rest = torch.cat([feats[:c], feats[c + 1:], base[None]])
    maps = {m: attribution_for(e.maps[m][c], method_aggregate(e, m)) for m in e.methods}
    sec = section_faithfulness(
        _segment_value(model, tgt, rest.max(dim=0).values), x[0, c], maps,
        steps=settings.section_steps, fraction=settings.section_fraction,
        baseline_hu=baseline_hu, random_orders=settings.section_random_orders, seed=seed,
        value_all=seg["value_all"], value_none=seg["value_none"])
    return {"segments": seg, "culprit_cross_sections": sec}
