"""Segment tracing: which segment won each pooled channel, and how much each segment contributed.

Because the patient vector is a maximum over segments, each pooled channel comes from exactly one
segment, its winner. Contributions use the value function

    v(T) = target(head(max over the segments in T and the baseline segment)),

where the baseline segment's features are the encoder's features of cross-sections filled with
the constant ``baseline_hu`` (so the empty coalition is "a patient whose vessels read as
``baseline_hu``"). Segment features are computed once; coalitions only run the head.

Ties: a channel shared by several segments is won by the lowest segment index, as ``torch.max``
(dim=...) picks on CPU. Shapley values within :data:`TIE_RTOL` of ``|v(all) - v(none)|`` of the
largest one are a culprit tie (:attr:`SegmentTrace.tied`): the lowest index is named, and the
report says the others were level with it.

Precision: the head usually runs in float32, whose rounding (about 1e-7 of the value) could
decide between two nearly equal Shapley values. Coalition values are therefore computed with a
float64 copy of the model where the head runs in float64 (and agrees with the float32 head to
:data:`FLOAT64_AGREEMENT`); otherwise in float32, and :attr:`SegmentTrace.value_dtype` says so.
"""

from __future__ import annotations

import copy
import math
import warnings
from dataclasses import dataclass

import numpy as np
import torch

from ..errors import InputError
from ._common import DEFAULT_HEAD_BATCH, baseline_features, batch_size, check_call, fixed_target, head_values

__all__ = [
    "SegmentTrace", "trace_segments", "exact_shapley", "coalition_values", "culprit_doubts",
    "MAX_EXACT", "LOW_MARGIN_FRACTION", "TIE_RTOL", "FLOAT64_AGREEMENT",
]

#: Above this many segments Shapley values are estimated by permutation sampling.
MAX_EXACT = 20

#: The culprit is called uncertain when its margin over the runner-up is below this share of
#: ``|v(all) - v(none)|``, the whole change the segments make to the target. Our own setting
#: (common practice, no source): a tenth of the total leaves the culprit clearly ahead.
LOW_MARGIN_FRACTION = 0.10

#: Shapley values closer than this share of ``|v(all) - v(none)|`` to the largest are tied with
#: it. Our own setting (common practice, no source): well above float32 rounding of a head's
#: output (about 1e-7 relative, summed over coalitions), far below a margin anyone would read.
TIE_RTOL = 1e-6

#: The float64 head is used only if ``v(all)`` and ``v(none)`` agree with the float32 head to
#: this share of ``1 + |v|`` (a model whose head changes meaning in float64 is not trusted).
FLOAT64_AGREEMENT = 1e-3


@dataclass(frozen=True, repr=False)
class SegmentTrace:
    """Per-segment contributions to one target for one patient.

    Attributes
    ----------
    winners : (C,) int
        Winning segment (index into the case's segments) of each pooled channel.
    gradient_x_feature : (S,) float64
        Gradient times feature at the pooled layer, summed over the channels each segment won
        (target units).
    leave_one_out : (S,) float64
        ``v(all) - v(all without s)``.
    shapley : (S,) float64
        Shapley values of the segments under ``v``; they sum to ``value_all - value_empty``.
    shapley_stderr : (S,) float64 or None
        Standard error when sampled (S > 20), None when exact.
    culprit : int
        Index of the segment with the largest Shapley value (lowest index on ties).
    margin : float
        Its Shapley value minus the second largest (its own value when S = 1).
    target_index : int or str
        The resolved target (column, ``"expected"`` or ``"key:column"``).
    value_all, value_empty : float
        ``v(all segments)`` and ``v(no segment)``.
    baseline_hu : float
    n_permutations : int or None
        Permutations drawn when sampled; ``seed`` the seed used.
    tied : tuple of int
        Other segments whose Shapley value is within :data:`TIE_RTOL` of the culprit's.
    value_dtype : str
        ``"float64"`` or ``"float32"``: the precision the coalition values were computed in.
    precision_note : str or None
        Why float32 was kept, when it was.
    """

    winners: np.ndarray
    gradient_x_feature: np.ndarray
    leave_one_out: np.ndarray
    shapley: np.ndarray
    shapley_stderr: np.ndarray | None
    culprit: int
    margin: float
    target_index: object
    value_all: float
    value_empty: float
    baseline_hu: float
    n_permutations: int | None = None
    seed: int | None = None
    tied: tuple = ()
    value_dtype: str = "float32"
    precision_note: str | None = None

    def __repr__(self):
        how = "exact" if self.shapley_stderr is None else f"{self.n_permutations} permutations"
        return (
            f"SegmentTrace(segments={self.shapley.shape[0]}, channels={self.winners.shape[0]}, "
            f"target={self.target_index!r}, culprit={self.culprit}, margin={self.margin:.4g}, "
            f"v(all)={self.value_all:.4g}, v(empty)={self.value_empty:.4g}, shapley {how}, "
            f"baseline={self.baseline_hu:g} HU)"
        )


def _subset_maxima(feats, base):
    """Pooled features of every subset of ``feats (k, C)`` (with ``base``), bit i = row i."""
    k = feats.shape[0]
    table = torch.empty((1 << k, feats.shape[1]), dtype=feats.dtype)
    table[0] = base
    for i in range(k):
        # masks in [2^i, 2^(i+1)) have highest bit i: the mask without it, plus row i
        half = 1 << i
        table[half : 2 * half] = torch.maximum(table[:half], feats[i])
    return table


def coalition_values(value_head, feats, base, *, batch=DEFAULT_HEAD_BATCH):
    """``v(T)`` for every coalition ``T`` of ``S`` segments, as a float64 array of length ``2^S``.

    Coalition ``T`` is the bit mask ``sum(2^s for s in T)``. The maxima are built by a subset
    recursion over two halves of the segments (low bits, high bits), so memory stays bounded by
    the head batch rather than ``2^S x C``.

    Parameters
    ----------
    value_head : callable
        ``pooled (M, C) -> (M,)`` float64 numpy values, e.g. ``target(head(pooled))``.
    feats : (S, C) tensor
        Segment features.
    base : (C,) tensor
        Baseline segment features (always in the coalition).
    """
    s = feats.shape[0]
    low_bits = min(s, max(1, int(math.log2(max(batch, 2)))))
    low = _subset_maxima(feats[:low_bits], base)
    high = _subset_maxima(feats[low_bits:], base)
    values = np.empty(1 << s, dtype=np.float64)
    size = 1 << low_bits
    for h in range(high.shape[0]):
        pooled = torch.maximum(low, high[h])
        values[h * size : (h + 1) * size] = value_head(pooled)
    return values


def exact_shapley(values, n):
    """Shapley values from ``v`` over all ``2^n`` coalitions (Shapley 1953).

    ``phi_i = sum over T not containing i of |T|! (n - |T| - 1)! / n! (v(T + i) - v(T))``.

    Examples
    --------
    >>> v = np.array([0.0, 1.0, 2.0, 4.0])   # v({0}) = 1, v({1}) = 2, v({0, 1}) = 4
    >>> exact_shapley(v, 2)
    array([1.5, 2.5])
    """
    masks = np.arange(1 << n, dtype=np.int64)
    pop = np.zeros(1 << n, dtype=np.int64)
    for i in range(n):
        pop += (masks >> i) & 1
    weight = np.array(
        [math.factorial(k) * math.factorial(n - k - 1) / math.factorial(n) for k in range(n)]
    )
    phi = np.empty(n)
    for i in range(n):
        without = masks[((masks >> i) & 1) == 0]
        phi[i] = np.dot(weight[pop[without]], values[without | (1 << i)] - values[without])
    return phi


def _sampled_shapley(value_head, feats, base, *, n_permutations, seed, batch):
    s = feats.shape[0]
    rng = np.random.default_rng(seed)
    marginals = np.zeros((n_permutations, s))
    per_chunk = max(1, batch // (s + 1))
    for start in range(0, n_permutations, per_chunk):
        count = min(per_chunk, n_permutations - start)
        perms = np.stack([rng.permutation(s) for _ in range(count)])
        order = torch.as_tensor(perms)
        steps = [base.expand(count, -1)]
        for j in range(s):
            steps.append(torch.maximum(steps[-1], feats[order[:, j]]))
        pooled = torch.stack(steps, dim=1).reshape(count * (s + 1), -1)
        v = value_head(pooled).reshape(count, s + 1)
        gains = np.diff(v, axis=1)
        rows = np.arange(count)[:, None]
        marginals[start + rows, perms] = gains
    mean = marginals.mean(axis=0)
    if n_permutations > 1:
        stderr = marginals.std(axis=0, ddof=1) / math.sqrt(n_permutations)
    else:
        stderr = np.full(s, np.nan)
    return mean, stderr


def _culprit(shapley, value_all, value_empty, *, rtol=TIE_RTOL):
    """Culprit index (lowest on ties), margin over the runner-up, and the segments tied with it.

    Examples
    --------
    >>> culprit, margin, tied = _culprit(np.array([0.2, 0.5, 0.5 - 1e-9, 0.1]), 1.3, 0.0)
    >>> culprit, round(margin, 12), tied
    (1, 1e-09, (2,))
    """
    order = np.argsort(-shapley, kind="stable")
    culprit = int(order[0])
    margin = float(shapley[order[0]] - (shapley[order[1]] if shapley.size > 1 else 0.0))
    scale = abs(float(value_all) - float(value_empty))
    tol = rtol * scale if scale > 0 else 1e-12
    tied = tuple(int(i) for i in order[1:] if shapley[culprit] - shapley[i] <= tol)
    return culprit, margin, tuple(sorted(tied))


def _float64_head(wrapped):
    """A float64 copy of ``wrapped`` (same split), or (None, reason) when the model refuses."""
    try:
        twin = copy.copy(wrapped)
        # TorchScript modules warn about .grad of non-leaf tensors while converting; the copy is
        # only trusted after the agreement check in _value_function, so the warning is moot.
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)
            twin.module = copy.deepcopy(wrapped.module).double()
        return twin, None
    except (RuntimeError, TypeError, ValueError, AttributeError) as exc:
        return None, f"{type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else ''}"


def _value_function(wrapped, tgt, feats, base, *, batch):
    """``v`` as a function of pooled rows, in float64 where the head allows it.

    Returns the function, ``"float64"`` or ``"float32"``, and a note saying why float32 was kept.
    """
    def value32(p):
        return head_values(wrapped, tgt, p, batch=batch)

    twin, reason = _float64_head(wrapped)
    if twin is not None:
        probe = torch.stack([torch.maximum(feats.max(dim=0).values, base), base])
        try:
            want = value32(probe)
            got = head_values(twin, tgt, probe.double(), batch=batch)
        except (RuntimeError, TypeError, ValueError) as exc:
            reason = f"{type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else ''}"
        else:
            if np.all(np.abs(got - want) <= FLOAT64_AGREEMENT * (1 + np.abs(want))):
                return (lambda p: head_values(twin, tgt, p.double(), batch=batch)), "float64", None
            reason = (f"the float64 head gave {got.tolist()} where float32 gave {want.tolist()} "
                      "for v(all), v(none)")
    return value32, "float32", (f"coalition values computed in float32: the head does not run "
                                f"in float64 ({reason})")


def trace_segments(
    wrapped, x, *, target, baseline_hu=0.0, internal_batch_size=None,
    max_exact=MAX_EXACT, n_permutations=256, seed=0,
):
    """Trace one patient's target back to its segments.

    Parameters
    ----------
    wrapped : WrappedModel
    x : (1, S, N, H, W) float tensor, HU
    target : int or str
        Column, ``"predicted"``, ``"expected"`` or ``"key:column"`` (see ``explain.model.targets``).
    baseline_hu : float
        The "absent" value: a removed segment counts as cross-sections filled with it.
    internal_batch_size : int, optional
        Rows per head call (default 16384); bounds memory.
    max_exact : int
        Largest S for exact Shapley values (at most 20: 2^S head rows).
    n_permutations, seed : int
        Permutation sampling above ``max_exact`` (seeded numpy Generator).

    Returns
    -------
    SegmentTrace
    """
    check_call(wrapped, x)
    batch = batch_size(internal_batch_size, default=DEFAULT_HEAD_BATCH)
    if isinstance(max_exact, bool) or not isinstance(max_exact, int) or not 1 <= max_exact <= MAX_EXACT:
        raise InputError(f"max_exact: expected an integer 1..{MAX_EXACT}, got {max_exact!r}")
    n_permutations = batch_size(n_permutations, default=256, name="n_permutations")
    with torch.no_grad():
        feats = wrapped.encode(x).detach()
    tgt = fixed_target(wrapped, x, target, feats=feats)
    feats = feats[0]
    base = baseline_features(wrapped, x, baseline_hu)
    s, c = feats.shape

    winners = torch.max(feats, dim=0).indices
    pooled = feats.max(dim=0).values.clone().requires_grad_(True)
    tgt(wrapped.head(pooled[None]))[0].backward()
    per_channel = (pooled.grad * pooled).detach().double()
    grad_x_feat = torch.zeros(s, dtype=torch.float64).index_add_(0, winners, per_channel).numpy()

    value_head, value_dtype, precision_note = _value_function(wrapped, tgt, feats, base,
                                                             batch=batch)

    value_all = float(value_head(torch.maximum(feats.max(dim=0).values, base)[None])[0])
    value_empty = float(value_head(base[None])[0])
    # leave one out: max of everything but s, from prefix and suffix maxima
    padded = torch.cat([base[None], feats, base[None]])
    prefix = torch.cummax(padded, dim=0).values
    suffix = torch.cummax(padded.flip(0), dim=0).values.flip(0)
    without = torch.maximum(prefix[:s], suffix[2:])
    leave_one_out = value_all - value_head(without)

    stderr = None
    if s <= max_exact:
        values = coalition_values(value_head, feats, base, batch=batch)
        shapley = exact_shapley(values, s)
        # the same head rows as the Shapley sums, so efficiency holds to float64 rounding
        value_all, value_empty = float(values[-1]), float(values[0])
        n_perm = used_seed = None
    else:
        shapley, stderr = _sampled_shapley(
            value_head, feats, base, n_permutations=n_permutations, seed=seed, batch=batch
        )
        n_perm, used_seed = n_permutations, seed
    culprit, margin, tied = _culprit(shapley, value_all, value_empty)
    return SegmentTrace(
        winners=winners.numpy(), gradient_x_feature=grad_x_feat,
        leave_one_out=np.asarray(leave_one_out),
        shapley=shapley, shapley_stderr=stderr, culprit=culprit, margin=margin,
        target_index=tgt.label, value_all=value_all, value_empty=value_empty,
        baseline_hu=float(baseline_hu), n_permutations=n_perm, seed=used_seed,
        tied=tied, value_dtype=value_dtype, precision_note=precision_note,
    )


def culprit_doubts(shapley, margin, value_all, value_empty, *, fraction=LOW_MARGIN_FRACTION):
    """Plain reasons why a culprit should not be named as certain; empty when it is clear.

    Two rules: no segment has a positive Shapley value (``"no_positive_segment"``: no segment
    raised the target), or the culprit's margin over the runner-up is below ``fraction`` of
    ``|v(all) - v(none)|`` (``"low_margin"``).

    Parameters
    ----------
    shapley : (S,) array_like
        Shapley values of the segments, target units.
    margin : float
        Culprit's Shapley value minus the second largest, target units.
    value_all, value_empty : float
        ``v(all segments)`` and ``v(no segment)``, target units.
    fraction : float
        Share of ``|v(all) - v(none)|`` below which the margin is called low.

    Returns
    -------
    tuple of str
        Subset of ``("no_positive_segment", "low_margin")``, in that order.

    Examples
    --------
    >>> culprit_doubts([0.9, 0.1], 0.8, 1.0, 0.0)
    ()
    >>> culprit_doubts([0.5, 0.45], 0.05, 1.0, 0.05)
    ('low_margin',)
    >>> culprit_doubts([-0.2, -0.3], 0.1, -0.5, 0.0)
    ('no_positive_segment',)
    """
    shapley = np.asarray(shapley, dtype=np.float64)
    doubts = []
    if not np.any(shapley > 0):
        doubts.append("no_positive_segment")
    if float(margin) < float(fraction) * abs(float(value_all) - float(value_empty)):
        doubts.append("low_margin")
    return tuple(doubts)
