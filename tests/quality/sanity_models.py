"""Tiny hand-built models for the sanity and stability tests (also loaded as FILE.py:FACTORY).

``WeightBlind``: per segment, the feature is the mean of (x / 100 HU)^2 plus a learned offset;
the head is a 1 -> 1 linear layer. The gradient of the target is ``w * 2 x / (100^2 n)`` for the
segment that wins the max (the offset is the same for every segment, so it never changes the
winner), so randomising any weight only rescales the map, or flips its sign: |map| keeps its
ranks exactly. A saliency method on it must fail the randomisation check.

``Scriptable``: a small protocol model TorchScript can compile.

``NoParameters``: the darkest value per segment, a max, a minus sign; nothing to randomise.
"""

import torch
from torch import nn


class Offset(nn.Module):
    """A learned constant added to the features; no reset_parameters (exercises the fallback)."""

    def __init__(self):
        super().__init__()
        self.value = nn.Parameter(torch.tensor([0.25]))

    def forward(self, f):
        return f + self.value


class WeightBlind(nn.Module):
    def __init__(self):
        super().__init__()
        self.offset = Offset()
        self.out = nn.Linear(1, 1)
        with torch.no_grad():
            self.out.weight.fill_(2.0)
            self.out.bias.fill_(-1.0)

    def encode_segments(self, x):
        energy = (x / 100.0).pow(2).mean(dim=(2, 3, 4))  # (B, S)
        return self.offset(energy[..., None])             # (B, S, 1)

    def head(self, pooled):
        return self.out(pooled)

    def forward(self, x):
        return self.head(self.encode_segments(x).max(dim=1).values)


class Scriptable(nn.Module):
    """A protocol model that TorchScript can compile (encoder and head exported)."""

    def __init__(self):
        super().__init__()
        self.enc = nn.Linear(1, 3)
        self.out = nn.Linear(3, 2)

    @torch.jit.export
    def encode_segments(self, x):
        return torch.relu(self.enc((x / 100.0).pow(2).mean(dim=(2, 3, 4)).unsqueeze(-1)))

    @torch.jit.export
    def head(self, pooled):
        return self.out(pooled)

    def forward(self, x):
        return self.head(self.encode_segments(x).max(dim=1).values)


class NoParameters(nn.Module):
    def forward(self, x):
        feats = x.amin(dim=(2, 3, 4))[..., None]
        return -feats.amax(dim=1)


def weight_blind():
    return WeightBlind()


def no_parameters():
    return NoParameters()
