"""A zoo of small patient models written the way researchers write them, each with its outcome.

Every model takes ``x (B, S, N, H, W)`` in HU. They are our own, tiny (a few hundred weights,
seeded), and meant for ``culprit-lens explain`` on a small phantom with few points and small
cross-sections. :data:`OUTCOMES` says what each must do: wrap automatically ("plain"), wrap
through the protocol methods ("protocol"), or be refused with a message containing a given text.
"""

from __future__ import annotations

import torch
from torch import nn
from torch.nn import functional as F


def _seeded(module, seed=0, scale=0.5):
    g = torch.Generator().manual_seed(seed)
    with torch.no_grad():
        for p in module.parameters():
            p.copy_(torch.randn(p.shape, generator=g) * scale)
    return module


class FoldedChannels2D(nn.Module):
    """Segments folded into the batch; a 2-D CNN takes the N cross-sections as channels."""

    def __init__(self, points=6, channels=3):
        super().__init__()
        self.conv = nn.Conv2d(points, channels, 3, padding=1)
        self.fc = nn.Linear(channels, 4)
        _seeded(self)

    def forward(self, x):
        b, s, n, h, w = x.shape
        f = torch.tanh(self.conv(x.view(b * s, n, h, w) / 300.0)).mean(dim=(2, 3))
        f = f.view(b, s, -1)
        return self.fc(torch.max(f, dim=1)[0])


class Conv3dHeadModule(nn.Module):
    """A 3-D CNN over (N, H, W) with the patient MLP kept as a submodule named ``head``."""

    def __init__(self, channels=3):
        super().__init__()
        self.conv1 = nn.Conv3d(1, channels, 3, padding=1)
        self.conv2 = nn.Conv3d(channels, channels, 3, stride=2, padding=1)
        self.head = nn.Sequential(nn.Linear(channels, 8), nn.ReLU(), nn.Linear(8, 4))
        _seeded(self)

    def forward(self, x):
        b, s = x.shape[:2]
        z = torch.tanh(self.conv1(x.reshape(b * s, 1, *x.shape[2:]) / 300.0))
        z = torch.relu(self.conv2(z)).amax(dim=(2, 3, 4)).reshape(b, s, -1)
        return self.head(torch.max(z, dim=1).values)


class SequentialPermutePool(nn.Module):
    """``nn.Sequential`` blocks, a ``permute`` and ``nn.AdaptiveMaxPool1d`` over segments."""

    def __init__(self, channels=3):
        super().__init__()
        self.encoder = nn.Sequential(
            nn.Conv3d(1, channels, 3, padding=1), nn.Tanh(),
            nn.Conv3d(channels, channels, 3, stride=2, padding=1), nn.ReLU(),
            nn.AdaptiveAvgPool3d(1), nn.Flatten())
        self.pool = nn.AdaptiveMaxPool1d(1)
        self.classifier = nn.Sequential(nn.Flatten(), nn.Linear(channels, 4))
        _seeded(self)

    def forward(self, x):
        b, s = x.shape[:2]
        f = self.encoder(x.reshape(b * s, 1, *x.shape[2:]) / 300.0).reshape(b, s, -1)
        return self.classifier(self.pool(f.permute(0, 2, 1)))


class _Encoder3d(nn.Module):
    def __init__(self, channels=3):
        super().__init__()
        self.conv = nn.Conv3d(1, channels, 3, stride=2, padding=1)

    def forward(self, x):
        b, s = x.shape[:2]
        z = torch.tanh(self.conv(x.reshape(b * s, 1, *x.shape[2:]) / 300.0))
        return z.mean(dim=(2, 3, 4)).reshape(b, s, -1)


class DictHeads(nn.Module):
    """A multitask model returning a dict: grade logits and a one-column calcium score."""

    def __init__(self):
        super().__init__()
        self.enc = _Encoder3d()
        self.grade = nn.Linear(3, 7)
        self.calcium = nn.Linear(3, 1)
        _seeded(self)

    def forward(self, x):
        p = self.enc(x).amax(dim=1)
        return {"grade": self.grade(p), "calcium": self.calcium(p)}


class TupleHeads(nn.Module):
    """A multitask model returning a tuple (grade logits, plaque score); ``as_list`` for a list."""

    def __init__(self, as_list=False):
        super().__init__()
        self.enc = _Encoder3d()
        self.grade = nn.Linear(3, 4)
        self.plaque = nn.Linear(3, 2)
        self.as_list = as_list
        _seeded(self)

    def forward(self, x):
        p = torch.max(self.enc(x), dim=1).values
        out = (self.grade(p), self.plaque(p))
        return list(out) if self.as_list else out


def tuple_heads_list():
    """:class:`TupleHeads` returning a list."""
    return TupleHeads(as_list=True)


class Float64Model(nn.Module):
    """Parameters in float64 (``.double()``), as after training in double precision."""

    def __init__(self):
        super().__init__()
        self.enc = _Encoder3d()
        self.fc = nn.Linear(3, 4)
        _seeded(self)
        self.double()

    def forward(self, x):
        return self.fc(self.enc(x).amax(dim=1))


class TrainModeBatchNorm(nn.Module):
    """BatchNorm and Dropout, handed over in train mode."""

    def __init__(self):
        super().__init__()
        self.conv = nn.Conv3d(1, 3, 3, padding=1)
        self.norm = nn.BatchNorm3d(3)
        self.drop = nn.Dropout(0.5)
        self.fc = nn.Linear(3, 4)
        _seeded(self)
        self.train()

    def forward(self, x):
        b, s = x.shape[:2]
        z = torch.relu(self.norm(self.conv(x.reshape(b * s, 1, *x.shape[2:]) / 300.0)))
        f = self.drop(z.mean(dim=(2, 3, 4))).reshape(b, s, -1)
        return self.fc(f.amax(dim=1))


class DropoutForcedOn(nn.Module):
    """Dropout forced on whatever the mode (Monte-Carlo dropout): two passes differ."""

    def __init__(self):
        super().__init__()
        self.enc = _Encoder3d()
        self.fc = nn.Linear(3, 4)
        _seeded(self)

    def forward(self, x):
        f = F.dropout(self.enc(x), p=0.5, training=True)
        return self.fc(f.amax(dim=1))


class ProtocolMixing(nn.Module):
    """Protocol model whose encode_segments subtracts the mean over segments: they mix."""

    def __init__(self):
        super().__init__()
        self.enc = _Encoder3d()
        self.fc = nn.Linear(3, 4)
        _seeded(self)

    def encode_segments(self, x):
        f = self.enc(x)
        return f - f.mean(dim=1, keepdim=True)

    def head(self, pooled):
        return self.fc(pooled)

    def forward(self, x):
        return self.head(self.encode_segments(x).max(dim=1).values)


class ScriptProtocol(nn.Module):
    """Protocol methods exported with ``@torch.jit.export``, for scripting or tracing."""

    def __init__(self):
        super().__init__()
        self.conv = nn.Conv3d(1, 3, 3, stride=2, padding=1)
        self.fc = nn.Linear(3, 4)
        _seeded(self)

    @torch.jit.export
    def encode_segments(self, x):
        b, s = x.shape[0], x.shape[1]
        z = torch.tanh(self.conv(x.reshape(b * s, 1, x.shape[2], x.shape[3], x.shape[4]) / 300.0))
        return z.mean(dim=(2, 3, 4)).reshape(b, s, -1)

    @torch.jit.export
    def head(self, pooled):
        return self.fc(pooled)

    def forward(self, x):
        return self.head(torch.max(self.encode_segments(x), dim=1)[0])


class TraceProtocol(nn.Module):
    """Protocol methods without decorators, for ``torch.jit.trace_module`` of all three."""

    def __init__(self):
        super().__init__()
        self.inner = ScriptProtocol()

    def encode_segments(self, x):
        return self.inner.encode_segments(x)

    def head(self, pooled):
        return self.inner.head(pooled)

    def forward(self, x):
        return self.head(torch.max(self.encode_segments(x), dim=1)[0])


class ScriptPlain(nn.Module):
    """The same computation with no protocol methods: its max is hidden inside TorchScript."""

    def __init__(self):
        super().__init__()
        self.inner = ScriptProtocol()

    def forward(self, x):
        b, s = x.shape[0], x.shape[1]
        z = torch.tanh(self.inner.conv(x.reshape(b * s, 1, x.shape[2], x.shape[3], x.shape[4])
                                       / 300.0))
        f = z.mean(dim=(2, 3, 4)).reshape(b, s, -1)
        return self.inner.fc(torch.max(f, dim=1)[0])


def scripted(module):
    """``torch.jit.script`` (deprecated in torch 2.13, still what many researchers ship)."""
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        return torch.jit.script(module)


def traced(module, x, *, protocol=False):
    """``torch.jit.trace`` of forward, or of forward and the protocol methods."""
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if not protocol:
            return torch.jit.trace(module, x)
        pooled = module.encode_segments(x).max(dim=1).values
        return torch.jit.trace_module(
            module, {"forward": x, "encode_segments": x, "head": pooled})


#: name -> (how it is given, extra command-line options, expected outcome). The outcome is
#: "plain" or "protocol" (wraps that way and explains with the default methods, exit 0) or
#: ("refused", text the one-line error must contain).
OUTCOMES = {
    "FoldedChannels2D": ("factory", [], "plain"),
    "FoldedChannels2D-points": ("factory", ["--points", "5"], (
        "refused", "--points (points) 5 conflicts with the model's spec (6); the value you gave "
                   "wins")),
    "Conv3dHeadModule": ("factory", [], "plain"),
    "SequentialPermutePool": ("factory", [], "plain"),
    "DictHeads": ("factory", ["--target", "grade:expected", "--grade-labels",
                              "0,1,2,3,4A,4B,5"], "plain"),
    "DictHeads-no-target": ("factory", [], ("refused", "'grade:0'")),
    "TupleHeads": ("factory", ["--target", "0:predicted"], "plain"),
    "TupleHeads-list": ("factory", ["--target", "1:0"], "plain"),
    "Float64Model": ("factory", [], "plain"),
    "TrainModeBatchNorm": ("factory", [], "plain"),
    "DropoutForcedOn": ("factory", [], ("refused", "two identical")),
    "ProtocolMixing": ("factory", [], ("refused", "mixes segments")),
    "ScriptProtocol-scripted": ("script", [], "protocol"),
    "TraceProtocol-traced": ("trace-protocol", [], "protocol"),
    "ScriptPlain-scripted": ("script", [], ("refused", "@torch.jit.export")),
    "ScriptPlain-traced": ("trace", [], ("refused", "@torch.jit.export")),
}
