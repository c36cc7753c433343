"""What a model must satisfy to be explained faithfully, checked the same way on every path.

- Repeatable: two identical forward passes give the same output. A model that samples (dropout
  forced on, Monte-Carlo dropout, noise layers) has no single output to explain.
- Segments encoded independently: a segment's features do not change when another segment is
  added. Tracing the culprit and the segment-local saliency rest on it (see
  :mod:`explain.attribution.local`).

Both are compared with ``torch.allclose(rtol=1e-4, atol=1e-5)`` (common practice for float32
reruns, no source). When the features change with an added segment, the same input is encoded
once more, so that a model which merely is not repeatable is not reported as mixing segments.
"""

from __future__ import annotations

import torch

from ..errors import ModelError

__all__ = ["PROTOCOL_HELP", "close", "extra_segment", "refuse_unrepeatable", "same_output"]

RTOL, ATOL = 1e-4, 1e-5

PROTOCOL_HELP = (
    "Give the module two methods instead: encode_segments(x (B, S, N, H, W)) -> (B, S, C) "
    "features per segment, and head(pooled (B, C)) -> output; the model is then "
    "head(encode_segments(x).max(dim=1).values)."
)


def close(a, b):
    """Whether two feature tensors agree to the rerun tolerance."""
    return a.shape == b.shape and torch.allclose(a, b, rtol=RTOL, atol=ATOL)


def same_output(got, ref, *, rows=1):
    """Whether ``got`` is ``ref`` (a tensor, dict, tuple or list of tensors) repeated ``rows`` times
    along the batch axis."""
    if isinstance(ref, dict):
        return isinstance(got, dict) and set(got) == set(ref) and all(
            same_output(got[k], ref[k], rows=rows) for k in ref)
    if isinstance(ref, (tuple, list)):
        return (isinstance(got, (tuple, list)) and len(got) == len(ref)
                and all(same_output(g, r, rows=rows) for g, r in zip(got, ref)))
    if not isinstance(ref, torch.Tensor):
        return got == ref
    if not isinstance(got, torch.Tensor) or got.ndim != ref.ndim or (
            ref.ndim and got.shape[0] != rows * ref.shape[0]):
        return False
    if ref.ndim == 0:
        return bool(torch.allclose(got, ref, rtol=RTOL, atol=ATOL))
    return torch.allclose(got, ref.repeat((rows,) + (1,) * (ref.ndim - 1)), rtol=RTOL, atol=ATOL)


def extra_segment(x):
    """``x (B, S, N, H, W)`` with one more segment: a copy of the first one, or, when there is
    only one, that segment mirrored with its HU values halved (so that it differs from it in
    any feature, even one blind to the pixels' order)."""
    first = x[:, :1]
    added = first if x.shape[1] > 1 else 0.5 * first.flip(dims=(2, 4))
    return torch.cat([x, added], dim=1)


def refuse_unrepeatable(name, where):
    """Raise the error for a model whose ``where`` (e.g. "forward") changes between passes."""
    raise ModelError(
        f"{name}: two identical {where} passes on the same input gave different results, so "
        "there is no single output to explain. Common causes: dropout forced on "
        "(F.dropout(..., training=True), Monte-Carlo dropout) or random sampling inside the "
        "model; make it deterministic in eval mode (culprit-lens calls eval())")
