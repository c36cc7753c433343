"""The bundled reference network: a compact 3D CNN per segment, a max over segments, a small head.

Our own small design for synthetic phantoms. Each segment's stack of cross-sections
``(N, H, W)`` in HU is normalised inside the network, passed through four 3x3x3 convolutions
(two of them with stride 2) and reduced to ``C`` features by a spatial maximum; the patient
vector is the maximum of those over segments; a two-layer head gives one logit per CAD-RADS 2.0
category 0, 1, 2, 3, 4A, 4B, 5. See ``docs/reference-model.md`` for training and limits
(synthetic data only; not for real scans).
"""

from __future__ import annotations

from importlib import resources

import torch
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


class ReferenceNet(nn.Module):
    """Compact 3D CNN over each segment, max over segments, MLP head.

    Parameters
    ----------
    channels : int
        Width of the first convolution; later ones use 2x.
    features : int
        C, the per-segment feature vector length.

    Notes
    -----
    Layer geometry (for Grad-CAM): ``features.4`` (third convolution, stride 1) follows a
    stride-2 convolution with kernel 3 and padding 1, so its cell ``j`` is centred on input
    pixel ``2 j`` along each axis (stride 2, offset 0), not on ``2 j + 0.5`` as a plain
    resize would assume.
    """

    cross_section_spec = REFERENCE_SPEC
    grade_labels = CATEGORIES
    cam_layer = "features.4"
    cam_stride = (2.0, 2.0, 2.0)
    cam_offset = (0.0, 0.0, 0.0)

    def __init__(self, *, channels=8, features=32):
        super().__init__()
        c = channels
        self.features = nn.Sequential(
            nn.Conv3d(1, c, 3, padding=1), nn.ReLU(),
            nn.Conv3d(c, 2 * c, 3, stride=2, padding=1), nn.ReLU(),
            nn.Conv3d(2 * c, 2 * c, 3, padding=1), nn.ReLU(),
            nn.Conv3d(2 * c, features, 3, stride=2, padding=1), nn.ReLU(),
        )
        self.classifier = nn.Sequential(
            nn.Linear(features, 32), nn.ReLU(), nn.Linear(32, len(CATEGORIES))
        )

    def encode_segments(self, x):
        """Features ``(B, S, C)`` of ``x (B, S, N, H, W)`` in HU."""
        b, s = x.shape[:2]
        z = ((x - _CENTRE_HU) / _SCALE_HU).reshape(b * s, 1, *x.shape[2:])
        f = self.features(z).amax(dim=(2, 3, 4))
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
