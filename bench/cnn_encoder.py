"""A 3-D CNN encoder of about 425 k parameters (432 k), for bench/memory.py (``FILE.py:FACTORY``).

Untrained on purpose (seeded random weights): the benchmark measures memory and time, not
accuracy. Per segment: four 3x3x3 convolutions over the stack (N, H, W), widths 24, 48, 100, 100,
the last two with stride 2; a global maximum gives C = 100 features; the patient vector is the
maximum over segments; a linear head gives 7 logits (CAD-RADS 2.0 categories 0 to 5).
"""

from __future__ import annotations

import torch
from torch import nn

from explain.model import CrossSectionSpec

WIDTHS = (24, 48, 100, 100)


class Encoder3d(nn.Module):
    """``encode_segments(x (B, S, N, H, W)) -> (B, S, 100)`` and ``head(pooled) -> (B, 7)``."""

    cross_section_spec = CrossSectionSpec(points=32, size=24, pixel_mm=0.5)
    grade_labels = ("0", "1", "2", "3", "4A", "4B", "5")

    def __init__(self):
        super().__init__()
        layers, width = [], 1
        for n, out in enumerate(WIDTHS):
            layers += [nn.Conv3d(width, out, 3, stride=1 if n < 2 else 2, padding=1), nn.ReLU()]
            width = out
        self.convs = nn.Sequential(*layers)
        self.fc = nn.Linear(width, len(self.grade_labels))

    def encode_segments(self, x):
        b, s = x.shape[:2]
        z = (x.reshape(b * s, 1, *x.shape[2:]) - 250.0) / 350.0
        return self.convs(z).amax(dim=(2, 3, 4)).reshape(b, s, -1)

    def head(self, pooled):
        return self.fc(pooled)


def build():
    """The encoder with weights drawn from ``torch.manual_seed(0)``."""
    torch.manual_seed(0)
    return Encoder3d().eval()


if __name__ == "__main__":
    print(sum(p.numel() for p in build().parameters()), "parameters")
