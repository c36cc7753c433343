"""The bounded-memory paths give the very values of the whole-image paths they replace.

Sampling reads a box of voxels around each stack, in the image's stored type until then;
splatting accumulates in the bounding box of the voxels reached and is placed into the image's
grid only on request. Each is compared, bit for bit, with the path it replaced, written out here
in full: the whole image cast to float32 (``sitk.Cast``, as ``read_image`` returned it before)
and the trilinear corners of the whole grid; the bincount over the whole image's flat span.
The splat is also checked against SimpleITK's own physical-to-index map.
"""

import numpy as np
import pytest
import SimpleITK as sitk

import sys
from pathlib import Path

from explain.geometry import Centerline, SplatBox, place, sample_cross_sections, splat, splat_box

sys.path.insert(0, str(Path(__file__).parent))
from whole_image import whole_image_sample, whole_image_splat  # noqa: E402


def _image(dtype=np.int16, size=(30, 26, 22), seed=0):
    rng = np.random.default_rng(seed)
    values = rng.integers(-1000, 1500, size[::-1]).astype(dtype)
    image = sitk.GetImageFromArray(values)
    image.SetSpacing((0.45, 0.5, 0.6))
    image.SetOrigin((-7.0, 3.5, 40.0))
    c, s = np.cos(0.3), np.sin(0.3)
    image.SetDirection((c, -s, 0.0, s, c, 0.0, 0.0, 0.0, 1.0))
    return image


def _lines(image):
    """Centerlines inside, along the rim, and half outside the image (index space -> mm)."""
    def line(*ijk):
        return Centerline([image.TransformContinuousIndexToPhysicalPoint(p) for p in ijk])

    n = [float(v) - 1 for v in image.GetSize()]
    return [
        line((5, 5, 4), (20, 18, 15), (24, 8, 17)),
        line((0, 0, 0), (n[0], n[1], n[2])),                      # corner to corner
        line((n[0], 3, 5), (n[0], 20, 16)),                       # on the top i face
        line((-6, 10, 10), (12, 12, 11), (n[0] + 5, 14, n[2] + 3)),  # in and out
    ]


@pytest.mark.parametrize("dtype", [np.int16, np.uint8, np.float32])
def test_cropped_sampling_equals_whole_image_float32(dtype):
    image = _image(dtype)
    for n, line in enumerate(_lines(image)):
        cs = sample_cross_sections(image, line, points=9, size=7, pixel_mm=0.7,
                                   rotation_deg=15.0 * n)
        expected, _ = whole_image_sample(image, cs)
        np.testing.assert_array_equal(cs.values, expected)


def test_splat_box_placed_equals_whole_grid_accumulation():
    image = _image(np.float32, size=(40, 36, 30))
    stacks = [sample_cross_sections(image, line, points=12, size=9, pixel_mm=0.5)
              for line in _lines(image)]
    rng = np.random.default_rng(5)
    maps = [rng.normal(size=cs.shape).astype(np.float32) for cs in stacks]
    box = splat_box(maps, stacks, like=image)
    assert isinstance(box, SplatBox)
    whole, whole_weight = whole_image_splat(maps, stacks, image)
    np.testing.assert_array_equal(sitk.GetArrayFromImage(place(box, image)), whole)
    np.testing.assert_array_equal(sitk.GetArrayFromImage(place(box, image, weight=True)),
                                  whole_weight)
    out, out_weight = splat(maps, stacks, like=image, return_weight=True)
    np.testing.assert_array_equal(sitk.GetArrayFromImage(out), whole)
    np.testing.assert_array_equal(sitk.GetArrayFromImage(out_weight), whole_weight)
    # One vessel's box is the bounding box of the voxels it reaches, no more.
    small = splat_box(maps[:1], stacks[:1], like=image)
    _, reached = whole_image_splat(maps[:1], stacks[:1], image)
    hit = np.nonzero(reached > 0)  # k, j, i
    assert small.start == tuple(int(a.min()) for a in hit[::-1])
    assert small.mean.shape == tuple(int(a.max() - a.min()) + 1 for a in hit)
    assert small.mean.size < np.prod(image.GetSize())
    # Independent of our corner code: each pixel's eight voxels from SimpleITK's own
    # TransformPhysicalPointToContinuousIndex, accumulated over the whole image.
    n_vox = int(np.prod(image.GetSize()))
    total, weight = np.zeros(n_vox), np.zeros(n_vox)
    ni, nj, nk = image.GetSize()
    for m, cs in zip(maps, stacks):
        for p, v in zip(cs.points_mm.reshape(-1, 3), m.reshape(-1)):
            c = np.array(image.TransformPhysicalPointToContinuousIndex(tuple(p)))
            if (c < -1e-6).any() or (c > np.array([ni, nj, nk]) - 1 + 1e-6).any():
                continue
            c = np.clip(c, 0, np.array([ni, nj, nk]) - 1)
            f = np.minimum(np.floor(c).astype(int), np.array([ni, nj, nk]) - 2)
            t = c - f
            for corner in np.ndindex(2, 2, 2):
                q = f + corner
                w = np.prod(np.where(corner, t, 1 - t))
                flat = (q[2] * nj + q[1]) * ni + q[0]
                total[flat] += w * v
                weight[flat] += w
    mean = np.divide(total, weight, out=np.zeros(n_vox), where=weight > 0)
    got = sitk.GetArrayFromImage(place(box, image)).reshape(-1)
    # Voxels reached with a weight near 0 hang on round-off of the two index maps; compare the
    # rest (float32 output).
    sure = weight > 1e-6
    np.testing.assert_allclose(got[sure], mean[sure], rtol=1e-5, atol=1e-6)


def test_place_refuses_another_image():
    from explain.errors import InputError

    image = _image(np.float32)
    cs = sample_cross_sections(image, _lines(image)[0], points=4, size=3, pixel_mm=0.5)
    box = splat_box([np.ones(cs.shape)], [cs], like=image)
    with pytest.raises(InputError, match="size"):
        place(box, sitk.Image([5, 5, 5], sitk.sitkFloat32))


def test_int16_file_stays_int16_and_float64_becomes_float32(tmp_path):
    from explain.io import read_image

    image = _image(np.int16)
    sitk.WriteImage(image, str(tmp_path / "ct.nii.gz"))
    back = read_image(tmp_path / "ct.nii.gz")
    assert back.GetPixelID() == sitk.sitkInt16
    np.testing.assert_array_equal(sitk.GetArrayViewFromImage(back),
                                  sitk.GetArrayViewFromImage(image))
    wide = sitk.Cast(image, sitk.sitkFloat64)
    sitk.WriteImage(wide, str(tmp_path / "wide.nrrd"))
    assert read_image(tmp_path / "wide.nrrd").GetPixelID() == sitk.sitkFloat32
