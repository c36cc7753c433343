"""Speed of cross-section sampling and splatting against reference implementations.

16 segments x 64 sections x 32 x 32 pixels on a synthetic 256^3 float32 volume.

* sampling: ``explain.geometry.sample_cross_sections`` (resampling, frames, positions, index
  map and trilinear interpolation, all included) against
  ``scipy.ndimage.map_coordinates(order=1)`` given the very same voxel coordinates
  precomputed (interpolation only).
* splatting: ``explain.geometry.splat`` against the same trilinear scatter written with
  ``np.add.at``.

Each is the best of several repeats, ours and the reference interleaved in this process.
The last line is ``ratio=<scipy time / our sampling time>``.

Run: ``.venv/bin/python bench/sampling.py``
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
import SimpleITK as sitk
from scipy import ndimage

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout

from explain.geometry import Centerline, sample_cross_sections, splat  # noqa: E402

SEED = 20261201
SEGMENTS, POINTS, SIZE, PIXEL_MM = 16, 64, 32, 0.4
REPEATS = 7


def best_of_pair(ours, reference, repeats=REPEATS):
    """Best time of each, the two runs interleaved so both see the same machine load."""
    times = ([], [])
    for _ in range(repeats):
        for function, bucket in ((ours, times[0]), (reference, times[1])):
            start = time.perf_counter()
            function()
            bucket.append(time.perf_counter() - start)
    return min(times[0]), min(times[1])


def make_volume(n=256):
    # Separable smooth field, built in a few numpy operations.
    axis = np.arange(n, dtype=np.float32)
    array = (
        100.0 * np.sin(axis / 7.0)[None, None, :]
        + 50.0 * np.cos(axis / 11.0)[None, :, None]
        + 30.0 * np.sin(axis / 5.0)[:, None, None]
    ).astype(np.float32)
    image = sitk.GetImageFromArray(array)
    image.SetSpacing((0.4, 0.4, 0.5))
    image.SetOrigin((-51.0, -51.0, -64.0))
    return image, array


def make_lines(image, rng):
    size = np.array(image.GetSize())
    lines = []
    for _ in range(SEGMENTS):
        start = rng.uniform(0.25, 0.75, 3) * size
        steps = rng.normal(0.0, 12.0, (5, 3)).cumsum(axis=0)
        # Keep centerlines ~20 voxels from the faces so whole sections stay inside.
        index = np.clip(start + np.vstack([[0, 0, 0], steps]), 20, size - 21)
        lines.append(
            Centerline([image.TransformContinuousIndexToPhysicalPoint(p.tolist()) for p in index])
        )
    return lines


def voxel_coordinates(image, sections):
    """(k, j, i) coordinates of every pixel, for map_coordinates (array axis order)."""
    origin = np.array(image.GetOrigin())
    affine = np.array(image.GetDirection()).reshape(3, 3) * np.array(image.GetSpacing())
    index = (sections.points_mm.reshape(-1, 3) - origin) @ np.linalg.inv(affine).T
    return np.ascontiguousarray(index[:, ::-1].T)


def inside_masks(image, coordinates):
    upper = np.array(image.GetSize()[::-1])[:, None] - 1
    return [((c >= 0) & (c <= upper)).all(axis=0) for c in coordinates]


def splat_add_at(maps, stacks, like):
    """Reference trilinear scatter with np.add.at (same weights as splat)."""
    shape = like.GetSize()[::-1]
    origin = np.array(like.GetOrigin())
    affine = np.array(like.GetDirection()).reshape(3, 3) * np.array(like.GetSpacing())
    inverse = np.linalg.inv(affine)
    total = np.zeros(shape)
    weight = np.zeros(shape)
    upper = np.array(like.GetSize()) - 1
    for values, cs in zip(maps, stacks):
        index = (cs.points_mm.reshape(-1, 3) - origin) @ inverse.T
        inside = ((index >= 0) & (index <= upper)).all(axis=1)
        index, vals = index[inside], values.reshape(-1)[inside]
        floor = np.minimum(index.astype(np.intp), upper - 1)
        frac = index - floor
        for corner in np.ndindex(2, 2, 2):
            c = np.array(corner)
            w = np.prod(np.where(c == 1, frac, 1.0 - frac), axis=1)
            i, j, k = (floor + c).T
            np.add.at(weight, (k, j, i), w)
            np.add.at(total, (k, j, i), w * vals)
    return np.where(weight > 0, total / np.where(weight > 0, weight, 1.0), 0.0)


def main():
    rng = np.random.default_rng(SEED)
    image, array = make_volume()
    lines = make_lines(image, rng)

    def ours():
        return [
            sample_cross_sections(image, line, points=POINTS, size=SIZE, pixel_mm=PIXEL_MM)
            for line in lines
        ]

    stacks = ours()
    coordinates = [voxel_coordinates(image, cs) for cs in stacks]

    def scipy_reference():
        return [ndimage.map_coordinates(array, c, order=1) for c in coordinates]

    # Same numbers first (pixels inside the volume; scipy's own outside handling differs).
    difference = max(
        float(np.abs(cs.values.reshape(-1) - ref)[inside].max())
        for cs, ref, inside in zip(stacks, scipy_reference(), inside_masks(image, coordinates))
    )
    outside = sum(cs.n_outside for cs in stacks)
    t_ours, t_scipy = best_of_pair(ours, scipy_reference)

    maps = [cs.values for cs in stacks]
    splat_ours = sitk.GetArrayFromImage(splat(maps, stacks, like=image))
    splat_reference = splat_add_at(maps, stacks, image)
    splat_difference = float(np.abs(splat_ours - splat_reference).max())
    t_splat, t_add_at = best_of_pair(
        lambda: splat(maps, stacks, like=image), lambda: splat_add_at(maps, stacks, image),
        repeats=3,
    )

    pixels = SEGMENTS * POINTS * SIZE * SIZE
    print(f"volume 256^3 float32, {SEGMENTS} segments x {POINTS} x {SIZE} x {SIZE} = {pixels} px, "
          f"seed {SEED}, {outside} px outside")
    print(f"sampling: ours {t_ours * 1e3:.1f} ms (whole sample_cross_sections), "
          f"scipy map_coordinates(order=1) {t_scipy * 1e3:.1f} ms (interpolation only), "
          f"max |difference| {difference:.2e} HU")
    print(f"splat: ours {t_splat * 1e3:.1f} ms, np.add.at {t_add_at * 1e3:.1f} ms, "
          f"max |difference| {splat_difference:.2e}")
    print(f"speed-up splat against np.add.at: {t_add_at / t_splat:.2f}")
    print(f"speed-up sampling against scipy: {t_scipy / t_ours:.2f}")
    print(f"ratio={t_scipy / t_ours:.3f}")


if __name__ == "__main__":
    main()
