"""Gradient family: plain gradient, gradient times input, SmoothGrad (through captum).

- ``gradient``: d target / d x (captum ``Saliency`` with ``abs=False`` by default).
- ``gradient_x_input``: gradient times input (captum ``InputXGradient``), in HU x gradient.
- ``smoothgrad`` (Smilkov et al. 2017): the gradient averaged over ``n`` noisy copies of the
  input (captum ``NoiseTunnel`` around ``Saliency``); noise sd is ``noise`` times the HU range of
  ``x``, drawn with ``torch.manual_seed(seed)`` inside a forked RNG. The noise is added to the
  whole patient (every segment at once), since the segment-local function would keep the other
  segments noise-free and answer a different question.

The first two run per segment on the segment-local function, which has the whole model's
gradient (up to exact ties in the max).
"""

from __future__ import annotations

import torch
from captum.attr import InputXGradient, NoiseTunnel, Saliency

from ..errors import InputError
from .local import SegmentLocal, whole_model

__all__ = ["gradient", "gradient_x_input", "smoothgrad"]


def _per_segment(method_cls, wrapped, x, target, **kwargs):
    with torch.no_grad():
        feats = wrapped.encode(x)[0]
    maps = []
    for s in range(x.shape[1]):
        f_s = SegmentLocal(wrapped, x, target, s, feats=feats)
        inp = x[:, s].clone().requires_grad_(True)
        maps.append(method_cls(f_s).attribute(inp, **kwargs).detach())
    return torch.stack(maps, dim=1)


def gradient(wrapped, x, target, *, abs=False):  # noqa: A002 - captum's name for the option
    """Gradient of the target with respect to every HU value; ``abs=True`` gives its magnitude."""
    return _per_segment(Saliency, wrapped, x, target, abs=bool(abs))


def gradient_x_input(wrapped, x, target):
    """Gradient times input (HU)."""
    return _per_segment(InputXGradient, wrapped, x, target)


def smoothgrad(  # noqa: A002 - captum's name for the abs option
    wrapped, x, target, *, n=50, noise=0.15, seed=0, internal_batch_size=None, abs=False,
):
    """SmoothGrad: the mean gradient over ``n`` copies with Gaussian noise of sd ``noise`` x HU range."""
    if isinstance(n, bool) or not isinstance(n, int) or n < 1:
        raise InputError(f"smoothgrad n: expected a positive number of samples, got {n!r}")
    if isinstance(noise, bool) or not isinstance(noise, (int, float)) or not noise >= 0:
        raise InputError(f"smoothgrad noise: expected a fraction of the HU range >= 0, got {noise!r}")
    sd = float(noise) * float(x.max() - x.min())
    tunnel = NoiseTunnel(Saliency(whole_model(wrapped, target)))
    with torch.random.fork_rng(devices=[]):
        torch.manual_seed(seed)
        out = tunnel.attribute(
            x.clone(), nt_type="smoothgrad", nt_samples=n, stdevs=sd,
            nt_samples_batch_size=internal_batch_size or 8, abs=bool(abs),
        )
    return out.detach()
