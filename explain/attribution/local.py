"""The segment-local function: one segment's input, the other segments' features held fixed.

For segment ``s`` of one patient,

    f_s(x_s) = target(head(max(encode(x_s), m_s))),

where ``m_s`` is the maximum of the cached features of the other segments. Because the patient
vector is a maximum over segments and segments are encoded independently, ``f_s`` equals the whole
model as a function of segment ``s`` alone: its gradients are the whole model's, and an occlusion
of segment ``s`` changes the whole model exactly as it changes ``f_s`` - while running the
encoder on one segment instead of S.
"""

from __future__ import annotations

import torch

__all__ = ["SegmentLocal", "whole_model"]


class SegmentLocal:
    """``f_s`` for segment ``s`` of the patient ``x (1, S, N, H, W)``, as a captum forward function.

    Calling it on ``x_s (M, N, H, W)`` gives ``(M,)``: the target for M variants of segment s.
    """

    def __init__(self, wrapped, x, target, segment, *, feats=None):
        self.wrapped, self.target, self.segment = wrapped, target, segment
        if feats is None:
            with torch.no_grad():
                feats = wrapped.encode(x)[0]
        others = torch.cat([feats[:segment], feats[segment + 1 :]]).detach()
        self.others = others.max(dim=0).values if others.shape[0] else None

    def __repr__(self):
        return f"SegmentLocal(segment={self.segment}, model={self.wrapped.name!r})"

    def __call__(self, x_s):
        own = self.wrapped.encode(x_s[:, None])[:, 0]
        pooled = own if self.others is None else torch.maximum(own, self.others)
        return self.target(self.wrapped.head(pooled))


def whole_model(wrapped, target):
    """The whole model as a captum forward function: ``x (M, S, N, H, W) -> (M,)``."""

    def forward(x):
        return target(wrapped.forward(x))

    return forward
