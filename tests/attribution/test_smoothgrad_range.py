"""SmoothGrad's noise scale comes from the pixels inside the CT, not the -1000 HU fill.

References: SimpleITK ``TransformPhysicalPointToContinuousIndex`` decides which pixels lie inside
the image; captum ``NoiseTunnel`` (Smilkov et al. 2017) with the same standard deviation is the
reference for the map.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest
import SimpleITK as sitk
import torch
from captum.attr import NoiseTunnel, Saliency

from explain.attribution import attribute
from explain.attribution.gradients import inside_range_hu
from explain.geometry import Centerline, sample_cross_sections
from explain.model import wrap_model

_h = importlib.util.spec_from_file_location("h", Path(__file__).with_name("helpers.py"))
h = importlib.util.module_from_spec(_h)
_h.loader.exec_module(h)


def test_range_skips_pixels_beyond_the_image_edge():
    ramp = np.linspace(-80.0, 420.0, 16 * 16 * 16, dtype=np.float32).reshape(16, 16, 16)
    image = sitk.GetImageFromArray(ramp)
    # A centerline along the image's x edge: half of every cross-section lies outside.
    cs = sample_cross_sections(image, Centerline([[0.0, 8.0, 2.0], [0.0, 8.0, 13.0]]),
                               points=6, size=7, pixel_mm=1.0)
    assert cs.n_outside > 0 and cs.values.min() == -1000.0
    inside = np.array([all(-1e-6 <= c <= n - 1 + 1e-6 for c, n in zip(
        image.TransformPhysicalPointToContinuousIndex(tuple(float(v) for v in p)), image.GetSize()))
        for p in cs.points_mm.reshape(-1, 3)])
    want = (float(cs.values.reshape(-1)[inside].min()), float(cs.values.reshape(-1)[inside].max()))
    assert inside_range_hu([cs], image) == want
    assert want[0] > -1000.0


def test_smoothgrad_noise_scale_is_noise_times_the_given_range():
    net = h.tm.SmallConv()
    x = h.patient(s=2, seed=5)
    x[0, 0, :, 0, :] = -1000.0  # a rim of fill that must not set the scale
    ours = attribute(wrap_model(net), x, method="smoothgrad", target=1, n=6, noise=0.1, seed=3,
                     range_hu=(-200.0, 300.0))
    torch.manual_seed(3)
    ref = NoiseTunnel(Saliency(net)).attribute(
        x.clone(), nt_type="smoothgrad", nt_samples=6, stdevs=0.1 * 500.0, target=1,
        nt_samples_batch_size=8, abs=False)
    torch.testing.assert_close(ours, ref, rtol=1e-5, atol=1e-6)


def test_range_of_all_pixels_when_none_lies_inside():
    # A centerline well beyond the image: every pixel is the -1000 HU fill, so the range is that
    # of all pixels (numpy min/max of the values), not an empty one.
    image = sitk.GetImageFromArray(np.zeros((8, 8, 8), dtype=np.float32))
    cs = sample_cross_sections(image, Centerline([[40.0, 40.0, 40.0], [40.0, 40.0, 50.0]]),
                               points=4, size=5, pixel_mm=1.0)
    assert inside_range_hu([cs], image) == (float(cs.values.min()), float(cs.values.max()))


def test_range_spans_every_section():
    # Two sections, each inside the image: the range is the min and max over both (numpy).
    ramp = np.linspace(0.0, 100.0, 16 * 16 * 16, dtype=np.float32).reshape(16, 16, 16)
    image = sitk.GetImageFromArray(ramp)
    a = sample_cross_sections(image, Centerline([[8.0, 8.0, 2.0], [8.0, 8.0, 5.0]]),
                              points=3, size=3, pixel_mm=1.0)
    b = sample_cross_sections(image, Centerline([[8.0, 8.0, 10.0], [8.0, 8.0, 13.0]]),
                              points=3, size=3, pixel_mm=1.0)
    want = (float(min(a.values.min(), b.values.min())), float(max(a.values.max(), b.values.max())))
    assert inside_range_hu([a, b], image) == want
    assert inside_range_hu([b, a], image) == want
    assert want[0] < float(b.values.min()) and want[1] > float(a.values.max())


def _inside_by_simpleitk(image, cs):
    return np.array([all(-1e-6 <= c <= n - 1 + 1e-6 for c, n in zip(
        image.TransformPhysicalPointToContinuousIndex(tuple(float(v) for v in p)), image.GetSize()))
        for p in cs.points_mm.reshape(-1, 3)])


def test_pixels_on_the_far_edge_count_and_those_beyond_it_do_not():
    # HU = 10 x on a 16-voxel grid: a centerline on the last plane x = 15, half-pixel spacing,
    # so pixels lie on the edge (inside, 150 HU) and 0.5 to 3 voxels beyond it (outside).
    ramp = np.fromfunction(lambda k, j, i: 10.0 * i, (16, 16, 16)).astype(np.float32)
    image = sitk.GetImageFromArray(ramp)
    cs = sample_cross_sections(image, Centerline([[15.0, 8.0, 3.0], [15.0, 8.0, 12.0]]),
                               points=4, size=13, pixel_mm=0.5)
    inside = _inside_by_simpleitk(image, cs)
    values = cs.values.reshape(-1)
    want = (float(values[inside].min()), float(values[inside].max()))
    assert want[1] == pytest.approx(150.0) and (~inside).any()
    assert inside_range_hu([cs], image) == want


def test_a_uniform_inside_is_a_range_of_zero_width():
    # every pixel inside is 40 HU, the rest is the -1000 HU fill: the range is (40, 40)
    image = sitk.GetImageFromArray(np.full((8, 8, 8), 40.0, dtype=np.float32))
    cs = sample_cross_sections(image, Centerline([[0.0, 4.0, 1.0], [0.0, 4.0, 6.0]]),
                               points=3, size=5, pixel_mm=1.0)
    assert cs.values.min() == -1000.0 and _inside_by_simpleitk(image, cs).any()
    assert inside_range_hu([cs], image) == (40.0, 40.0)
