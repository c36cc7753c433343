"""Helpers shared by the attribution methods: checks, the baseline segment, batched head runs."""

from __future__ import annotations

import torch

from ..errors import InputError
from ..model.targets import resolve_target
from ..model.wrap import WrappedModel

DEFAULT_HEAD_BATCH = 16384


def check_call(wrapped, x, *, one_patient=True):
    if not isinstance(wrapped, WrappedModel):
        raise InputError(
            f"wrapped: expected a WrappedModel (from wrap_model or load_model), got "
            f"{type(wrapped).__name__}"
        )
    wrapped.check_input(x)
    if one_patient and x.shape[0] != 1:
        raise InputError(f"x: explain one patient at a time (B = 1), got B = {x.shape[0]}")


def batch_size(value, *, default, name="internal_batch_size"):
    if value is None:
        return default
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise InputError(f"{name}: expected a positive integer, got {value!r}")
    return value


def fixed_target(wrapped, x, target, *, feats=None):
    """The target resolved at the whole model's output for ``x`` (so "predicted" stays fixed).

    With the segment features ``feats (1, S, C)`` at hand, the output is ``head(max(feats))``,
    which is the whole model's output without running the encoder again.
    """
    with torch.no_grad():
        out = wrapped.forward(x) if feats is None else wrapped.head(feats.max(dim=1).values)
    return resolve_target(out, target, grade_labels=wrapped.grade_labels)


def baseline_features(wrapped, x, baseline_hu):
    """Encoder features ``(C,)`` of one segment filled with the constant ``baseline_hu``."""
    if not isinstance(baseline_hu, (int, float)) or isinstance(baseline_hu, bool):
        raise InputError(f"baseline_hu: expected a number of HU, got {baseline_hu!r}")
    seg = torch.full((1, 1) + tuple(x.shape[2:]), float(baseline_hu), dtype=x.dtype)
    with torch.no_grad():
        return wrapped.encode(seg)[0, 0]


def head_values(wrapped, target, pooled, *, batch):
    """``target(head(pooled))`` for pooled ``(M, C)`` in chunks of ``batch`` rows, float64 numpy."""
    out = []
    with torch.no_grad():
        for start in range(0, pooled.shape[0], batch):
            out.append(target(wrapped.head(pooled[start : start + batch])).double())
    return torch.cat(out).numpy()
