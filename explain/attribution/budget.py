"""Batch sizes of the model passes from a memory budget, instead of fixed counts.

Three passes run the model many times: Integrated Gradients (steps, each a whole patient with
gradients), occlusion (windows, each one segment without gradients) and the Shapley coalitions
(rows of pooled features through the head). How much memory one item of each takes is measured
once on the model itself, by a probe: one segment encoded with autograd on, counting the bytes
of every tensor autograd saves for the backward pass (``torch.autograd.graph.saved_tensors_hooks``),
and likewise one row through the head. The batch is the number of items that fit the budget,
between 1 and the fixed count used before (:data:`BATCH_CAPS`): on a CPU larger batches
bring little, and a small model keeps the very batches, and so the very sums, it always had.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import torch

from ..errors import InputError
from ._common import DEFAULT_HEAD_BATCH

__all__ = ["DEFAULT_MEMORY_BUDGET_GB", "BATCH_CAPS", "PassBatches", "check_budget",
           "batches_for_budget"]

#: Working memory the model passes may take, GB (1e9 bytes), besides the scan itself. Our own
#: setting (no source): with it, ``explain`` of a 512 x 512 x 400 scan peaks below 3 times the
#: scan's float32 size (bench/memory.py; the libraries and the int16 scan take about 0.65 GB).
DEFAULT_MEMORY_BUDGET_GB = 0.5

#: Largest batch of each pass: the fixed counts used before budgets (IG steps per call,
#: occlusion windows per encoder call, head rows per call).
BATCH_CAPS = {"integrated_gradients": 8, "occlusion": 16, "head": DEFAULT_HEAD_BATCH}

# A pass holds the saved activations, the forward's temporaries and, during the backward
# pass, their gradients: four times the saved bytes is the working set of one item. Our own
# calibration (no source): on the reference network one Integrated Gradients step took 3.3
# times the bytes autograd saved (bench/memory.py, resident memory during that pass).
_BACKWARD_FACTOR = 4.0


@dataclass(frozen=True)
class PassBatches:
    """Items per model call of each pass, and what they were derived from.

    Attributes
    ----------
    integrated_gradients : int
        Integrated Gradients steps per call (whole patients, with gradients).
    occlusion : int
        Occlusion windows per encoder call (one segment each, no gradients).
    head : int
        Rows of pooled features per head call (Shapley coalitions, leave-one-out).
    memory_budget_gb : float
        The budget, GB.
    segment_mb : float
        Measured bytes autograd saves for one segment through the encoder, MB.
    """

    integrated_gradients: int
    occlusion: int
    head: int
    memory_budget_gb: float
    segment_mb: float

    def to_dict(self):
        return asdict(self)

    def __repr__(self):
        return (f"PassBatches(IG steps {self.integrated_gradients}, occlusion windows "
                f"{self.occlusion}, head rows {self.head} per call; budget "
                f"{self.memory_budget_gb:g} GB, {self.segment_mb:.3g} MB per segment)")


def check_budget(memory_budget_gb, *, field="memory_budget_gb"):
    """The budget as a float > 0 (GB), or :class:`InputError` naming ``field``."""
    if isinstance(memory_budget_gb, bool) or not isinstance(memory_budget_gb, (int, float)) \
            or not math.isfinite(memory_budget_gb) or memory_budget_gb <= 0:
        raise InputError(f"{field}: expected a number of GB > 0 (e.g. 1.0), got "
                         f"{memory_budget_gb!r}")
    return float(memory_budget_gb)


def _saved_bytes(run):
    """Bytes of the distinct tensors autograd saves while ``run()`` builds its graph."""
    seen = {}

    def pack(t):
        key = (t.untyped_storage().data_ptr(), t.storage_offset(), tuple(t.shape))
        seen.setdefault(key, t.numel() * t.element_size())
        return t

    with torch.enable_grad(), torch.autograd.graph.saved_tensors_hooks(pack, lambda t: t):
        out = run()
    return sum(seen.values()), out


def _fit(budget_bytes, item_bytes, cap):
    return int(max(1, min(cap, budget_bytes // max(item_bytes, 1))))


def batches_for_budget(wrapped, x, *, memory_budget_gb=DEFAULT_MEMORY_BUDGET_GB):
    """Batch sizes of the model passes for one patient ``x (1, S, N, H, W)`` within a budget.

    Parameters
    ----------
    wrapped : WrappedModel
    x : (1, S, N, H, W) float tensor, HU
    memory_budget_gb : float
        Working memory the passes may take, GB (1e9 bytes).

    Returns
    -------
    PassBatches
    """
    budget = check_budget(memory_budget_gb) * 1e9
    s = int(x.shape[1])
    probe = x[:, :1].detach().clone().requires_grad_(True)
    segment_bytes, feats = _saved_bytes(lambda: wrapped.encode(probe))
    row = feats.detach()[:, 0].clone().requires_grad_(True)
    head_bytes, _ = _saved_bytes(lambda: wrapped.head(row))
    # An item's inputs count too: a patient tensor per IG step, a segment per window.
    segment_bytes += probe.numel() * probe.element_size()
    head_bytes += row.numel() * row.element_size()
    step_bytes = _BACKWARD_FACTOR * s * segment_bytes + _BACKWARD_FACTOR * head_bytes
    return PassBatches(
        integrated_gradients=_fit(budget, step_bytes, BATCH_CAPS["integrated_gradients"]),
        occlusion=_fit(budget, segment_bytes, BATCH_CAPS["occlusion"]),
        head=_fit(budget, _BACKWARD_FACTOR * head_bytes, BATCH_CAPS["head"]),
        memory_budget_gb=budget / 1e9,
        segment_mb=segment_bytes / 1e6,
    )
