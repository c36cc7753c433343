"""The bundled reference network: a compact 3D CNN per segment, a max over segments, a small head.

Our own small design for synthetic phantoms. Each segment's stack of cross-sections
``(N, H, W)`` in HU is normalised inside the network, given a local-texture channel (so that a
flat, hidden window is told apart from noisy tissue), passed through two 3x3x3 convolutions,
summarised per cross-section (centre-weighted mean and central maximum), filtered along the segment by
two 1D convolutions and reduced to ``C`` features by a maximum along the segment; the patient
vector is the maximum of those over segments; a two-layer head gives one logit per CAD-RADS 2.0
category 0, 1, 2, 3, 4A, 4B, 5. See ``docs/reference-model.md`` for training and limits
(synthetic data only; not for real scans).
"""

from __future__ import annotations

from importlib import resources

import torch
import torch.nn.functional as F
from torch import nn

from ..errors import ModelError
from ..grading import CATEGORIES
from .spec import CrossSectionSpec

__all__ = ["ReferenceNet", "REFERENCE_SPEC", "build_reference", "load_reference", "WEIGHTS_FILE"]

#: Sampling the reference network is built for: lumen about 4 mm = 8 px, wall and fat around it.
REFERENCE_SPEC = CrossSectionSpec(points=32, size=24, pixel_mm=0.5)
WEIGHTS_FILE = "reference.pt"

# HU window of the normalisation: fat (-100) to bright lumen and calcium (+600)
_CENTRE_HU = 250.0
_SCALE_HU = 350.0
# Texture channel: local sd in units of about the image noise (20-30 HU), with a floor
_NOISE_HU = 25.0
_FLOOR_HU = 2.0


def local_sd(z):
    """In-plane 3 x 3 local standard deviation of ``z (B, 1, N, H, W)``, in units of ~noise.

    A window filled with one value (an occlusion window, say) reads about 0.08 inside; noisy
    tissue about 0.5-1; a lumen or calcium edge more. The floor keeps the square root smooth.
    """
    k, pad = (1, 3, 3), (0, 1, 1)
    m = F.avg_pool3d(z, k, stride=1, padding=pad, count_include_pad=False)
    m2 = F.avg_pool3d(z * z, k, stride=1, padding=pad, count_include_pad=False)
    var = (m2 - m * m).clamp_min(0.0)
    return torch.sqrt(var + (_FLOOR_HU / _SCALE_HU) ** 2) * (_SCALE_HU / _NOISE_HU)


def _centre_weights(size, sigma):
    """(size, size) Gaussian weights around the plane's centre, summing to 1."""
    r = torch.arange(size, dtype=torch.float32) - (size - 1) / 2
    w = torch.exp(-(r[:, None] ** 2 + r[None, :] ** 2) / (2 * sigma**2))
    return w / w.sum()


class ReferenceNet(nn.Module):
    """Compact CNN per segment: 3D convolutions, lumen profiles along the segment, max, head.

    Parameters
    ----------
    channels : int
        Width of the two 3D convolutions.
    features : int
        C, the per-segment feature vector length.

    Notes
    -----
    Per segment: the normalised HU and its in-plane 3 x 3 local standard deviation
    (:func:`local_sd`) as two input channels; two 3x3x3 convolutions over the stack (N, H, W),
    the second with stride 2 in the plane; per cross-section, a centre-weighted mean (Gaussian,
    sd 2.5 px of the half-size grid, about 2.5 mm) and the maximum over the central half of the
    plane of each channel, and the centre-weighted mean of the normalised HU itself: lumen-,
    plaque- and calcium-like profiles along the segment, blind to what lies far from the
    centerline; two 1D convolutions along the segment (width 5, the second dilated by 2, no
    padding) that compare a cross-section with its neighbours over about 13 sections; the
    maximum along the segment.
    The patient vector is the maximum over segments.

    Layer geometry (for Grad-CAM): ``features.2`` (second 3D convolution, kernel 3, padding 1,
    stride 1 along the segment and 2 in the plane) has cell ``(n, j, k)`` centred on input pixel
    ``(n, 2 j, 2 k)``: stride (1, 2, 2), offset 0 - not ``2 j + 0.5`` as a plain resize assumes.
    """

    cross_section_spec = REFERENCE_SPEC
    grade_labels = CATEGORIES
    cam_layer = "features.2"
    cam_stride = (1.0, 2.0, 2.0)
    cam_offset = (0.0, 0.0, 0.0)

    def __init__(self, *, channels=8, features=32):
        super().__init__()
        c = channels
        self.features = nn.Sequential(
            nn.Conv3d(2, c, 3, padding=1), nn.ReLU(),
            nn.Conv3d(c, c, 3, stride=(1, 2, 2), padding=1), nn.ReLU(),
        )
        self.along = nn.Sequential(
            nn.Conv1d(2 * c + 1, 2 * c, 5), nn.ReLU(),
            nn.Conv1d(2 * c, features, 5, dilation=2), nn.ReLU(),
        )
        self.classifier = nn.Sequential(
            nn.Linear(features, 32), nn.ReLU(), nn.Linear(32, len(CATEGORIES))
        )

    def encode_segments(self, x):
        """Features ``(B, S, C)`` of ``x (B, S, N, H, W)`` in HU."""
        b, s = x.shape[:2]
        z = ((x - _CENTRE_HU) / _SCALE_HU).reshape(b * s, 1, *x.shape[2:])
        a = self.features(torch.cat([z, local_sd(z)], dim=1))  # (B*S, c, N, h, w), h = ceil(H / 2)
        h = a.shape[-1]
        lo, hi = h // 4, h - h // 4
        profiles = torch.cat([
            (a * _centre_weights(h, 2.5).to(a)).sum(dim=(3, 4)),
            a[..., lo:hi, lo:hi].amax(dim=(3, 4)),
            (z * _centre_weights(z.shape[-1], 5.0).to(z)).sum(dim=(3, 4)),
        ], dim=1)  # (B*S, 2c + 1, N)
        f = self.along(profiles).amax(dim=2)
        return f.reshape(b, s, -1)

    def head(self, pooled):
        """Logits ``(B, 7)`` of pooled features ``(B, C)``."""
        return self.classifier(pooled)

    def forward(self, x):
        return self.head(self.encode_segments(x).max(dim=1).values)


def build_reference(*, seed=0):
    """A freshly initialised (untrained) reference network, seeded."""
    gen_state = torch.random.get_rng_state()
    try:
        torch.manual_seed(seed)
        net = ReferenceNet()
    finally:
        torch.random.set_rng_state(gen_state)
    return net.eval()


def load_reference(*, weights=None):
    """The reference network with its shipped (trained) weights, or with ``weights`` if given."""
    from .load import load_weights

    net = build_reference()
    if weights is not None:
        return load_weights(net, weights)
    shipped = resources.files("explain.model").joinpath(WEIGHTS_FILE)
    if not shipped.is_file():
        raise ModelError(
            "builtin:reference: the trained weights (explain/model/reference.pt) are not in this "
            "installation; train them with examples/train_reference.py or pass weights=..."
        )
    with resources.as_file(shipped) as path:
        return load_weights(net, path)
