"""Grad-CAM layer geometry worked out from the model's layers, and the layer checks.

The rule: output cell j of a layer with kernel k, stride s, padding p and dilation d is centred
at input position j * s + d (k - 1) / 2 - p, and chained layers multiply strides and add offsets
(Dumoulin & Visin 2016, "A guide to convolution arithmetic for deep learning", section 2). The
independent check: the receptive field of an interior cell, found by autograd as the input
pixels its value depends on, is centred where the rule says.
"""

from __future__ import annotations

import pytest
import torch
from torch import nn

from explain.attribution.gradcam import LayerNotUsable, check_layer, resolve_geometry
from explain.model import wrap_model


class Chain(nn.Module):
    """A protocol model: ``layers`` (3-D, one channel in) per segment, then a mean and a max."""

    def __init__(self, *layers):
        super().__init__()
        self.features = nn.Sequential(*layers)

    def encode_segments(self, x):
        b, s = x.shape[:2]
        z = self.features(x.reshape(b * s, 1, *x.shape[2:]))
        return z.mean(dim=(2, 3, 4)).reshape(b, s, -1)

    def head(self, pooled):
        return pooled.sum(dim=1, keepdim=True)

    def forward(self, x):
        return self.head(self.encode_segments(x).max(dim=1).values)


def _receptive_centre(features, shape, cell):
    """Centre (per axis) of the input pixels that output ``cell`` of ``features`` depends on."""
    x = torch.zeros((1, 1) + shape, requires_grad=True)
    with torch.no_grad():
        for p in features.parameters():
            p.copy_(torch.ones_like(p) if p.ndim > 1 else torch.zeros_like(p))
    out = features(x + 1.0)
    out[(0, 0) + cell].backward()
    support = torch.nonzero(x.grad[0, 0])
    return tuple(float(support[:, a].min() + support[:, a].max()) / 2 for a in range(3))


@pytest.mark.parametrize("layers, cell", [
    ((nn.Conv3d(1, 2, 3, padding=1), nn.Conv3d(2, 2, 3, stride=2, padding=1)), (2, 2, 2)),
    ((nn.Conv3d(1, 2, 4, stride=2, padding=1),), (2, 3, 3)),
    # average, not max pooling: a max routes its gradient to one pixel, so autograd's support
    # would not show the pooling window
    ((nn.Conv3d(1, 2, 3), nn.ReLU(), nn.AvgPool3d(2)), (1, 2, 2)),
    ((nn.Conv3d(1, 2, 3, padding=2, dilation=2), nn.Conv3d(2, 2, (1, 3, 3), stride=(1, 2, 2))),
     (3, 2, 2)),
])
def test_derived_centres_match_the_receptive_field(layers, cell):
    shape = (10, 12, 12)
    net = Chain(*layers)
    w = wrap_model(net)
    geometry = check_layer(w, torch.zeros((1, 2) + shape), layer=f"features.{len(layers) - 1}")
    assert geometry.source == "layers"
    expected = _receptive_centre(net.features, shape, cell)
    got = tuple(o + st * j for o, st, j in zip(geometry.offset, geometry.stride, cell))
    assert got == pytest.approx(expected)


def test_max_pooling_window_centre_by_the_closed_form():
    # Dumoulin & Visin 2016: conv k=3, p=0 puts cell j at j + 1; a 2x2x2 max pool of stride 2
    # after it puts its cell j at the centre of conv cells 2j and 2j + 1, i.e. 2j + 1.5
    net = Chain(nn.Conv3d(1, 2, 3), nn.MaxPool3d(2))
    geometry = check_layer(wrap_model(net), torch.zeros(1, 2, 10, 12, 12), layer="features.1")
    assert geometry.stride == (2.0, 2.0, 2.0) and geometry.offset == (1.5, 1.5, 1.5)


def test_a_functional_resize_falls_back_to_the_resize_convention():
    class Resized(Chain):
        def encode_segments(self, x):
            b, s = x.shape[:2]
            z = self.features(x.reshape(b * s, 1, *x.shape[2:]))
            z = nn.functional.interpolate(z, scale_factor=0.5)  # not a module: cannot be followed
            z = self.last(z)
            return z.mean(dim=(2, 3, 4)).reshape(b, s, -1)

    net = Resized(nn.Conv3d(1, 2, 3, padding=1))
    net.last = nn.Conv3d(2, 2, 3, padding=1)
    geometry = check_layer(wrap_model(net), torch.zeros(1, 2, 8, 8, 8))
    assert geometry.name == "last" and geometry.source == "resize convention"
    assert geometry.stride is None and geometry.offset is None


def test_sections_as_channels_do_not_keep_the_layout():
    class AsChannels(nn.Module):
        def __init__(self):
            super().__init__()
            self.conv = nn.Conv2d(4, 2, 3, padding=1)

        def forward(self, x):
            b, s, n, h, w = x.shape
            f = self.conv(x.reshape(b * s, n, h, w)).mean(dim=(2, 3)).reshape(b, s, -1)
            return f.amax(dim=1)

    with pytest.raises(LayerNotUsable, match="does not keep the cross-section layout"):
        check_layer(wrap_model(AsChannels()), torch.randn(1, 2, 4, 6, 6))


def test_no_convolution_is_not_usable_and_a_head_layer_is_not_reached():
    class NoConv(nn.Module):
        def __init__(self):
            super().__init__()
            self.fc = nn.Linear(1, 2)

        def forward(self, x):
            return self.fc(x.mean(dim=(2, 3, 4))[..., None].amax(dim=1))

    w = wrap_model(NoConv())
    x = torch.randn(1, 2, 4, 6, 6)
    with pytest.raises(LayerNotUsable, match="no Conv2d/Conv3d"):
        check_layer(w, x)
    with pytest.raises(LayerNotUsable, match="not reached when encoding"):
        check_layer(w, x, layer="fc")


def test_module_geometry_wins_for_its_own_layer_and_given_values_win_over_both():
    net = Chain(nn.Conv3d(1, 2, 3, stride=2, padding=1))
    net.cam_layer, net.cam_stride, net.cam_offset = "features.0", (2.0, 2.0, 2.0), (0.5, 0.5, 0.5)
    w = wrap_model(net)
    x = torch.zeros(1, 2, 8, 8, 8)
    assert resolve_geometry(w, x).source == "module"
    given = resolve_geometry(w, x, layer_stride=2.0, layer_offset=0.25)
    assert (given.source, given.stride, given.offset) == ("given", 2.0, 0.25)


@pytest.mark.parametrize("layers, cell", [
    # padding given by name: "same" pads d (k - 1) / 2 each side, "valid" none (torch.nn.Conv3d)
    ((nn.Conv3d(1, 2, 3, padding="same"), nn.Conv3d(2, 2, 3, padding="valid")), (2, 3, 3)),
    ((nn.Conv3d(1, 2, 3, padding="same", dilation=2), nn.AvgPool3d(2, stride=2)), (2, 2, 2)),
    # a pooling without a stride steps by its kernel (torch.nn.AvgPool3d's default)
    ((nn.Conv3d(1, 2, (1, 3, 3), padding=(0, 1, 1)), nn.AvgPool3d((1, 3, 3))), (4, 2, 2)),
])
def test_named_padding_and_default_stride_match_the_receptive_field(layers, cell):
    test_derived_centres_match_the_receptive_field(layers, cell)


class PerSection(nn.Module):
    """2-D ``layers`` applied to each cross-section (N as batch), then a mean and a max."""

    def __init__(self, *layers):
        super().__init__()
        self.features = nn.Sequential(*layers)

    def encode_segments(self, x):
        b, s, n = x.shape[:3]
        z = self.features(x.reshape(b * s * n, 1, *x.shape[3:]))
        return z.mean(dim=(2, 3)).reshape(b, s, n, -1).mean(dim=2)

    def head(self, pooled):
        return pooled.sum(dim=1, keepdim=True)

    def forward(self, x):
        return self.head(self.encode_segments(x).max(dim=1).values)


def test_two_dimensional_layers_per_cross_section_match_the_receptive_field():
    # the same rule on (H, W) for Conv2d/AvgPool2d run on every cross-section (Dumoulin & Visin
    # 2016), checked against autograd's support of an interior cell
    layers = (nn.Conv2d(1, 2, 3, padding=1), nn.Conv2d(2, 2, 5, stride=2, padding=1),
              nn.AvgPool2d(2))
    net = PerSection(*layers)
    geometry = check_layer(wrap_model(net), torch.zeros(1, 2, 3, 20, 20), layer="features.2")
    assert geometry.source == "layers" and len(geometry.stride) == 2
    x = torch.zeros(1, 1, 20, 20, requires_grad=True)  # cells away from the edges
    with torch.no_grad():
        for p in net.features.parameters():
            p.copy_(torch.ones_like(p) if p.ndim > 1 else torch.zeros_like(p))
    net.features(x + 1.0)[0, 0, 1, 2].backward()
    support = torch.nonzero(x.grad[0, 0])
    expected = tuple(float(support[:, a].min() + support[:, a].max()) / 2 for a in range(2))
    got = tuple(o + st * j for o, st, j in zip(geometry.offset, geometry.stride, (1, 2)))
    assert got == pytest.approx(expected)
