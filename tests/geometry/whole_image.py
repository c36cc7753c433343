"""The whole-image paths that bounded memory replaced, kept as references for its tests.

Before, ``read_image`` cast every CT to float32 (``sitk.Cast``), sampling took the trilinear
corners on the whole grid, and splatting accumulated one bincount over the whole image's flat
span. These functions do exactly that, so the new paths can be compared with them bit for bit.
"""

import numpy as np
import SimpleITK as sitk

from explain.geometry._grid import Grid, corners, trilinear


def whole_image_sample(image, cs):
    """The path before the crop: every voxel as float32, corners on the whole grid."""
    full = sitk.Cast(image, sitk.sitkFloat32)
    grid = Grid(full, with_values=False)
    flat = np.ascontiguousarray(sitk.GetArrayFromImage(full)).reshape(-1)
    n, h, w = cs.shape
    index = grid.index_of(cs.points_mm).reshape(n, h * w, 3)
    base, offsets, wi, wj, wk, inside = corners(grid.size, index[..., 0], index[..., 1],
                                                index[..., 2])
    values = trilinear(flat, base, offsets, wi, wj, wk)
    if inside is not None:
        values[~inside] = cs.fill_value
    return values.reshape(n, h, w), index


def whole_image_splat(maps, stacks, like):
    """The path before the bounding box: one bincount over the whole image's flat span."""
    grid = Grid(like, with_values=False)
    flats, weights, values = [], [], []
    for m, cs in zip(maps, stacks):
        index = grid.index_of(cs.points_mm.reshape(-1, 3))
        base, (di, dj, dk), wi, wj, wk, inside = grid.corners(
            index[:, 0], index[:, 1], index[:, 2], dtype=np.float64)
        v = np.asarray(m, dtype=np.float64).reshape(-1)
        if inside is not None:
            base, v, wi, wj, wk = (a[inside] for a in (base, v, wi, wj, wk))
        # corner (i, j, k) major, pixel minor: the order the sums were always taken in
        for a, fa in ((0, 1.0 - wi), (di, wi)):
            for b, fb in ((0, 1.0 - wj), (dj, wj)):
                for c, fc in ((0, 1.0 - wk), (dk, wk)):
                    w = (fa * fb) * fc
                    flats.append(base + (a + b + c))
                    weights.append(w)
                    values.append(w * v)
    flat, weight_of, value_of = (np.concatenate(x) for x in (flats, weights, values))
    n_vox = int(np.prod(grid.size))
    mean, weight = np.zeros(n_vox, dtype=np.float32), np.zeros(n_vox)
    lo, hi = int(flat.min()), int(flat.max()) + 1
    span_weight = np.bincount(flat - lo, weights=weight_of, minlength=hi - lo)
    span_total = np.bincount(flat - lo, weights=value_of, minlength=hi - lo)
    np.divide(span_total, span_weight, out=span_total, where=span_weight > 0)
    mean[lo:hi] = span_total
    weight[lo:hi] = span_weight
    return mean.reshape(grid.shape), weight.astype(np.float32).reshape(grid.shape)
