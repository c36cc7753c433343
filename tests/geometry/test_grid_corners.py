"""_grid.corners and trilinear against scipy.ndimage.map_coordinates and hand-derived rules."""

import itertools

import numpy as np
import pytest
from scipy import ndimage

from explain.geometry._grid import INDEX_TOLERANCE, corners, trilinear


def _sample(volume, ci, cj, ck):
    """Trilinear read through corners + trilinear; ``volume`` is indexed [k, j, i]."""
    nk, nj, ni = volume.shape
    flat = np.ascontiguousarray(volume, dtype=np.float32).ravel()
    base, offsets, wi, wj, wk, inside = corners((ni, nj, nk), ci, cj, ck)
    return trilinear(flat, base, offsets, wi, wj, wk), inside


@pytest.mark.parametrize("shape", [(4, 5, 6), (3, 2, 7), (1, 4, 5), (4, 1, 5), (4, 5, 1)])
def test_values_match_scipy_map_coordinates_order_1_nearest_edges(shape):
    # scipy.ndimage.map_coordinates(order=1, mode="nearest") clamps coordinates to the grid
    # and interpolates linearly: the reference for in-range and clipped out-of-range points.
    rng = np.random.default_rng(15)  # seed recorded
    volume = rng.normal(0.0, 100.0, size=shape)
    nk, nj, ni = shape
    # random points over and beyond the grid, plus each axis's edges: 0, n - 1, half steps,
    # just past the top voxel and beyond the grid on both sides
    ci, cj, ck = (
        np.concatenate([rng.uniform(-1.5, n + 0.5, 300),
                        np.roll([0.0, n - 1.0, n - 1.5, n - 0.5, -0.4, n - 0.3, n + 0.3], shift)])
        for n, shift in ((ni, 0), (nj, 2), (nk, 4))
    )
    got, _ = _sample(volume, ci, cj, ck)
    expected = ndimage.map_coordinates(volume, [ck, cj, ci], order=1, mode="nearest")
    np.testing.assert_allclose(got, expected, rtol=1e-5, atol=1e-3)


def test_inside_mask_matches_brute_force_and_is_none_when_all_inside():
    size = (5, 4, 3)
    t = INDEX_TOLERANCE
    # On the tolerance limits exactly: every point counts as inside, so the mask is None (the
    # documented "None when every point is inside").
    ci = np.array([-t, 0.0, 4.0 + t, 2.0])
    cj = np.array([0.0, 3.0 + t, -t, 3.0])
    ck = np.array([2.0 + t, -t, 0.0, 2.0])
    assert corners(size, ci, cj, ck)[5] is None
    # Just beyond the limits: numpy brute force of the documented rule per axis.
    ci2 = np.array([-3 * t, 0.0, 4.0 + 3 * t, 2.0, 1.0])
    cj2 = np.array([0.0, 3.0 + 3 * t, 0.0, -3 * t, 1.0])
    ck2 = np.array([0.0, 0.0, 0.0, 2.0 + 3 * t, 1.0])
    inside = corners(size, ci2, cj2, ck2)[5]
    brute = np.ones(5, dtype=bool)
    for c, n in zip((ci2, cj2, ck2), size):
        brute &= (c >= -t) & (c <= n - 1 + t)
    assert np.array_equal(inside, brute)
    assert inside.tolist() == [False, False, False, False, True]  # hand-derived


def test_top_voxel_uses_the_cell_below_with_weight_one_and_float32_weights():
    # Hand-derived from the documented rule: index n - 1 reads corner n - 2 with weight 1, so
    # base + offset never passes the last voxel; an axis of one voxel has offset 0.
    base, offsets, wi, wj, wk, inside = corners((3, 4, 1), np.array([2.0]), np.array([3.0]),
                                                np.array([0.0]))
    assert offsets == (1, 3, 0)
    assert base.tolist() == [1 + 2 * 3]
    assert (wi.tolist(), wj.tolist(), wk.tolist()) == ([1.0], [1.0], [0.0])
    assert wi.dtype == wj.dtype == wk.dtype == np.float32 and inside is None
    base, offsets, *_ = corners((1, 1, 2), np.array([0.0]), np.array([0.0]), np.array([1.0]))
    assert offsets == (0, 0, 1) and base.tolist() == [0]


def test_every_corner_read_stays_inside_the_volume():
    # numpy brute force: for all corner combinations, base + offsets stays in [0, V - 1].
    rng = np.random.default_rng(16)  # seed recorded
    for size in [(2, 2, 2), (1, 3, 2), (5, 1, 1), (3, 4, 5)]:
        c = [np.concatenate([rng.uniform(-2, n + 1, 200), [0.0, n - 1.0]]) for n in size]
        base, offsets, *_ = corners(size, *c)
        for pick in itertools.product((0, 1), repeat=3):
            reach = base + sum(p * o for p, o in zip(pick, offsets))
            assert reach.min() >= 0 and reach.max() <= int(np.prod(size)) - 1


def test_grid_corners_pass_the_weight_dtype_on():
    import SimpleITK as sitk

    from explain.geometry._grid import Grid

    grid = Grid(sitk.Image(3, 4, 5, sitk.sitkFloat32))
    c = np.array([0.5, 1.25])
    assert grid.corners(c, c, c)[2].dtype == np.float32  # the documented default
    weights = grid.corners(c, c, c, dtype=np.float64)[2:5]
    assert all(w.dtype == np.float64 for w in weights)
    assert weights[0].tolist() == [0.5, 0.25]  # hand-derived: index minus its floor


def test_crop_without_values_says_so():
    import SimpleITK as sitk

    from explain.errors import InputError
    from explain.geometry._grid import Grid

    grid = Grid(sitk.Image(3, 4, 5, sitk.sitkFloat32), with_values=False)
    c = np.array([1.0])
    message = r"^Grid.crop: this grid was built without its image's values$"
    with pytest.raises(InputError, match=message):
        grid.crop(c, c, c)


@pytest.mark.parametrize("shape", [(1, 2, 3), (2, 1, 4), (3, 4, 1), (2, 2, 2), (5, 6, 7)])
def test_crop_reads_the_values_the_whole_image_gives(shape):
    # Reference: scipy.ndimage.map_coordinates(order=1, mode="nearest") on the whole array;
    # axes of one and two voxels are the crop's special cases.
    import SimpleITK as sitk

    from explain.geometry._grid import Grid

    rng = np.random.default_rng(17)  # seed recorded
    volume = rng.normal(0.0, 50.0, size=shape).astype(np.float32)
    grid = Grid(sitk.GetImageFromArray(volume))
    nk, nj, ni = shape
    ci, cj, ck = (rng.uniform(-0.5, n - 0.5, 50) for n in (ni, nj, nk))
    block, bi, bj, bk = grid.crop(ci, cj, ck)
    base, offsets, wi, wj, wk, _ = block.corners(bi, bj, bk)
    got = trilinear(block.flat, base, offsets, wi, wj, wk)
    expected = ndimage.map_coordinates(volume.astype(np.float64), [ck, cj, ci], order=1,
                                       mode="nearest")
    np.testing.assert_allclose(got, expected, rtol=1e-5, atol=1e-3)
    assert np.all(block.start >= 0) and np.all(block.start + block.size <= grid.size)


def test_crop_box_runs_from_the_lowest_floor_to_one_past_the_highest():
    # Hand-derived from the documented rule (per axis: floor of the smallest index to one past
    # the floor of the largest, kept within the image and at least two voxels long).
    import SimpleITK as sitk

    from explain.geometry._grid import Grid

    grid = Grid(sitk.Image(5, 6, 7, sitk.sitkFloat32))
    block, bi, *_ = grid.crop(np.array([1.2, 3.7]), np.array([0.0, 5.0]), np.array([-0.6, 2.5]))
    assert block.start.tolist() == [1, 0, 0] and block.size.tolist() == [4, 6, 4]
    assert np.array_equal(bi, np.array([1.2, 3.7]) - 1.0)  # shifted by the box start, exactly
    # every index on the top voxel: the box is the last two voxels of each axis
    top = grid.crop(np.array([4.0]), np.array([5.0]), np.array([6.0]))[0]
    assert top.start.tolist() == [3, 4, 5] and top.size.tolist() == [2, 2, 2]
    # every index below the image (outside, read clipped): the first two voxels of each axis
    low = grid.crop(np.array([-2.5]), np.array([-3.0]), np.array([-1.2]))[0]
    assert low.start.tolist() == [0, 0, 0] and low.size.tolist() == [2, 2, 2]
