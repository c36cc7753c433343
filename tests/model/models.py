"""Tiny hand-built patient models with known answers, shared by the model and attribution tests.

In the spirit of captum's ``captum/testing/helpers/basic_models.py``: small enough to check by hand.
"""

from __future__ import annotations

import torch
from torch import nn
from torch.nn import functional as F


class DarkestLumen(nn.Module):
    """Feature of a segment = minus its darkest central value; head = identity.

    The central 2x2 pixels of each cross-section stand for the lumen; the darker (narrower) the
    lumen somewhere along a segment, the larger that segment's feature. So the culprit is the
    segment holding the darkest central value, and the location is that pixel.
    """

    def forward(self, x):
        b, s, n, h, w = x.shape
        centre = x[:, :, :, h // 2 - 1 : h // 2 + 1, w // 2 - 1 : w // 2 + 1]
        feats = -centre.amin(dim=(2, 3, 4))[..., None]  # (B, S, 1)
        return torch.max(feats, dim=1).values  # (B, 1)


class SmallConv(nn.Module):
    """Protocol model: a 3D conv per segment, spatial mean, max over segments, linear head."""

    def __init__(self, channels=3, classes=4, seed=0):
        super().__init__()
        g = torch.Generator().manual_seed(seed)
        self.conv = nn.Conv3d(1, channels, 3, padding=1)
        self.conv2 = nn.Conv3d(channels, channels, 3, stride=2, padding=1)
        self.fc = nn.Linear(channels, classes)
        with torch.no_grad():
            for p in self.parameters():
                p.copy_(torch.randn(p.shape, generator=g) * 0.5)

    def encode_segments(self, x):
        b, s = x.shape[:2]
        z = torch.tanh(self.conv(x.reshape(b * s, 1, *x.shape[2:]) / 100.0))
        z = torch.relu(self.conv2(z))
        return z.mean(dim=(2, 3, 4)).reshape(b, s, -1)

    def head(self, pooled):
        return self.fc(pooled)

    def forward(self, x):
        return self.head(self.encode_segments(x).max(dim=1).values)


class PlainConv(nn.Module):
    """The same computation as :class:`SmallConv` without protocol methods; ``how`` picks the max."""

    def __init__(self, how="max", seed=0):
        super().__init__()
        self.inner = SmallConv(seed=seed)
        self.how = how

    def forward(self, x):
        b, s = x.shape[:2]
        z = torch.tanh(self.inner.conv(x.reshape(b * s, 1, *x.shape[2:]) / 100.0))
        z = torch.relu(self.inner.conv2(z))
        feats = z.mean(dim=(2, 3, 4)).reshape(b, s, -1)  # (B, S, C)
        if self.how == "max":
            pooled = torch.max(feats, dim=1).values
        elif self.how == "amax":
            pooled = feats.amax(1)
        elif self.how == "tensor_max_keepdim":
            pooled = feats.max(dim=1, keepdim=True)[0][:, 0]
        elif self.how == "max_pool1d":
            pooled = F.max_pool1d(feats.transpose(1, 2), s)[..., 0]
        elif self.how == "adaptive_module":
            pooled = nn.AdaptiveMaxPool1d(1)(feats.permute(0, 2, 1)).squeeze(-1)
        else:
            raise ValueError(self.how)
        return {"grade": self.inner.fc(pooled), "score": pooled.sum(dim=1, keepdim=True)}


class NoMax(nn.Module):
    def forward(self, x):
        return x.mean(dim=(1, 2, 3, 4))[:, None]


class TwoMaxes(nn.Module):
    def forward(self, x):
        feats = x.mean(dim=(2, 3, 4))[..., None]
        return feats.amax(dim=1) + torch.max(feats, dim=1).values


class Mixing(nn.Module):
    """Subtracts the segment mean before the max: segments are not independent."""

    def forward(self, x):
        feats = x.mean(dim=(2, 3, 4))[..., None]
        feats = feats - feats.mean(dim=1, keepdim=True)
        return feats.amax(dim=1)


class ChannelsEqualS(nn.Module):
    """A max over a channel axis whose size equals S, besides the real segment max."""

    def forward(self, x):
        b, s = x.shape[:2]
        feats = x.mean(dim=(3, 4))[..., :3]  # (B, S, 3): first three cross-sections
        pooled = feats.amax(dim=1)  # the segment max, (B, 3)
        return pooled.amax(dim=1, keepdim=True)  # over 3 channels: equals S when S = 3


class PerSection2D(nn.Module):
    """Protocol model whose encoder is a 2D conv applied to every cross-section."""

    def __init__(self, channels=3, seed=0):
        super().__init__()
        g = torch.Generator().manual_seed(seed)
        self.conv = nn.Conv2d(1, channels, 3, stride=2, padding=1)
        self.fc = nn.Linear(channels, 2)
        with torch.no_grad():
            for p in self.parameters():
                p.copy_(torch.randn(p.shape, generator=g) * 0.5)

    def encode_segments(self, x):
        b, s, n = x.shape[:3]
        z = torch.tanh(self.conv(x.reshape(b * s * n, 1, *x.shape[3:]) / 100.0))
        return z.amax(dim=(2, 3)).reshape(b, s, n, -1).mean(dim=2)

    def head(self, pooled):
        return self.fc(pooled)

    def forward(self, x):
        return self.head(self.encode_segments(x).max(dim=1).values)
