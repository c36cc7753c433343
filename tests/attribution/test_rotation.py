"""Rotation averaging: maps brought back to the unrotated frame, Spearman agreement."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest
import SimpleITK as sitk
import torch
from scipy.stats import spearmanr

from explain.attribution import attribute, rotate_back, rotation_average
from explain.errors import InputError
from explain.geometry import Centerline, sample_cross_sections
from explain.model import wrap_model

_h = importlib.util.spec_from_file_location("h", Path(__file__).with_name("helpers.py"))
h = importlib.util.module_from_spec(_h)
_h.loader.exec_module(h)


def _linear_image():
    """HU = 3 x + 2 y + z (mm) on a 1 mm grid: trilinear sampling reproduces it exactly."""
    arr_k_j_i = np.fromfunction(lambda k, j, i: 3 * i + 2 * j + k, (30, 30, 30)).astype(np.float32)
    img = sitk.GetImageFromArray(arr_k_j_i)
    img.SetSpacing((1.0, 1.0, 1.0))
    return img


def _sections(rotation_deg):
    line = Centerline(np.array([[15.0, 15.0, 8.0], [15.4, 14.7, 15.0], [15.8, 15.2, 22.0]]))
    return sample_cross_sections(
        _linear_image(), line, points=4, size=9, pixel_mm=0.7, rotation_deg=rotation_deg
    ).values


@pytest.mark.parametrize("angle", [37.0, 90.0, 200.0])
def test_rotate_back_matches_unrotated_sampling(angle):
    # the pixel convention of docs/architecture.md, end to end through the geometry sampler:
    # a linear field sampled at rotation r and brought back equals the field sampled at 0
    # (trilinear and bilinear interpolation reproduce linear functions exactly; elementary)
    back, valid = rotate_back(_sections(angle), angle)
    ref = _sections(0.0)
    np.testing.assert_allclose(back[:, valid], ref[:, valid], rtol=0, atol=2e-3)
    assert valid.sum() >= 0.6 * valid.size


def test_rotation_average_of_the_input_itself():
    # "map" = the input: averaging over rotations of a linear field gives the field back,
    # and the rotations agree perfectly (Spearman rank correlation 1)
    def resample(angle):
        return torch.from_numpy(np.array(_sections(angle)))[None, None]

    res = rotation_average(lambda x: x, resample, rotations=4)
    assert res.angles_deg == (0.0, 90.0, 180.0, 270.0)
    np.testing.assert_allclose(res.mean.numpy()[0, 0], _sections(0.0), atol=2e-3)
    assert res.agreement == pytest.approx(1.0, abs=1e-9)
    # the agreement is scipy.stats.spearmanr of the maps in the original frame
    b1, v1 = rotate_back(_sections(90.0), 90.0)
    assert res.spearman[0, 1] == pytest.approx(spearmanr(_sections(0.0).ravel(), b1.ravel()).statistic)


def test_attribute_with_rotations_and_errors():
    # DarkestLumen looks at the central 2 x 2 pixels, which quarter turns map onto themselves:
    # its gradient map turns with the input, so brought back it must equal the unrotated map
    w = wrap_model(h.tm.DarkestLumen())
    x = torch.full((1, 2, 3, 6, 6), 350.0)
    x[0, 1, 1, 2, 3] = 10.0

    def resample(angle):  # the convention at 90 degrees: xr[row, col] = x[col, W - 1 - row]
        return torch.rot90(x, k=int(round(angle / 90.0)) % 4, dims=(3, 4))

    plain = attribute(w, x, method="gradient", target=0)
    res = attribute(w, x, method="gradient", target=0, rotations=4, resample=resample)
    assert res.shape == x.shape and res.dtype == torch.float32
    torch.testing.assert_close(res, plain)
    res_obj = rotation_average(
        lambda z: attribute(w, z, method="gradient", target=0), resample, rotations=4
    )
    assert res_obj.agreement == pytest.approx(1.0)
    with pytest.raises(InputError, match="resample"):
        attribute(w, x, method="gradient", target=0, rotations=2)
    with pytest.raises(InputError, match="rotations"):
        rotation_average(lambda z: z, resample, rotations=0)


def test_case_resampler_uses_the_geometry_sampler():
    # a case-like object with two segments on the linear field: the resampler's rotated stacks,
    # brought back, equal its unrotated ones (convention of docs/architecture.md, end to end)
    from types import SimpleNamespace

    from explain.attribution import case_resampler
    from explain.model import CrossSectionSpec

    lines = [
        Centerline(np.array([[15.0, 15.0, 8.0], [15.4, 14.7, 15.0], [15.8, 15.2, 22.0]])),
        Centerline(np.array([[10.0, 12.0, 10.0], [14.0, 13.0, 14.0], [18.0, 15.0, 17.0]])),
    ]
    case = SimpleNamespace(
        image=_linear_image(),
        segments=tuple(SimpleNamespace(id=i + 1, centerline=c) for i, c in enumerate(lines)),
    )
    resample = case_resampler(case, CrossSectionSpec(points=3, size=7, pixel_mm=0.6))
    x0, x1 = resample(0.0), resample(60.0)
    assert x0.shape == (1, 2, 3, 7, 7) and x0.dtype == torch.float32
    back, valid = rotate_back(x1.numpy(), 60.0)
    np.testing.assert_allclose(back[..., valid], x0.numpy()[..., valid], atol=2e-3)
    # pixels beyond the image take the fill value asked for (the sampler's own -1000 HU
    # default would hide a fill that is not passed on)
    far = SimpleNamespace(image=case.image, segments=(SimpleNamespace(
        id=1, centerline=Centerline(np.array([[0.0, 15.0, 8.0], [0.0, 15.0, 20.0]]))),))
    x_far = case_resampler(far, CrossSectionSpec(points=3, size=7, pixel_mm=1.0),
                           fill_value=-321.0)(0.0)
    assert (x_far == -321.0).any() and not (x_far == -1000.0).any()


def _random_maps(k, shape=(1, 2, 3, 7, 7), seed=11):
    g = np.random.default_rng(seed)
    return {360.0 * j / k: torch.from_numpy(g.normal(size=shape)) for j in range(k)}


def test_mean_and_agreement_over_three_rotations_by_numpy_and_scipy():
    # 120-degree turns leave corners outside the rotated square: the mean is, pixel by pixel,
    # the numpy mean of the rotations that cover it, and the agreement the mean off-diagonal
    # scipy.stats.spearmanr over the pixels two rotations both cover.
    maps = _random_maps(3)
    calls = []

    def resample(angle):
        calls.append(angle)
        return maps[angle]

    res = rotation_average(lambda x: (x, None), resample, rotations=3, x0=maps[0.0])
    assert calls == [120.0, 240.0]          # the given unrotated input is used as it is
    backs, valids = zip(*(rotate_back(maps[a].numpy(), a) for a in (0.0, 120.0, 240.0)))
    assert not valids[1].all() and valids[0].all()
    want = np.zeros(maps[0.0].shape)
    for i in np.ndindex(*want.shape):
        covered = [b[i] for b, v in zip(backs, valids) if v[i[-2:]]]
        want[i] = np.mean(covered)
    np.testing.assert_allclose(res.mean.numpy(), want, rtol=1e-6, atol=1e-6)
    rho = np.eye(3)
    for a in range(3):
        for b in range(a + 1, 3):
            both = valids[a] & valids[b]
            rho[a, b] = rho[b, a] = spearmanr(backs[a][..., both].ravel(),
                                              backs[b][..., both].ravel()).statistic
    np.testing.assert_allclose(res.spearman, rho, rtol=1e-12)
    assert res.agreement == pytest.approx((rho[0, 1] + rho[0, 2] + rho[1, 2]) / 3, rel=1e-12)
    assert abs(res.agreement) < 0.5            # independent noise does not agree


def test_one_rotation_is_the_map_itself_with_agreement_one():
    maps = _random_maps(1)
    res = rotation_average(lambda x: x, lambda a: maps[a], rotations=1)
    np.testing.assert_allclose(res.mean.numpy(), maps[0.0].numpy(), rtol=1e-6)
    assert res.agreement == 1.0 and res.spearman.tolist() == [[1.0]]


def test_constant_maps_have_no_rank_correlation():
    # A constant map has no ranks: scipy's Spearman is undefined (nan) off the diagonal; the
    # diagonal stays 1 and the agreement is nan, not a number made up.
    res = rotation_average(lambda x: torch.ones(1, 1, 1, 5, 5), lambda a: None, rotations=2)
    assert res.spearman[0, 0] == 1.0 and res.spearman[1, 1] == 1.0
    assert np.isnan(res.spearman[0, 1]) and np.isnan(res.agreement)
    np.testing.assert_allclose(res.mean.numpy(), 1.0)


def test_agreement_skips_the_pairs_without_ranks():
    # rotation 0 constant, rotations 120 and 240 noise: only their pair counts (numpy nanmean)
    maps = _random_maps(3, shape=(1, 1, 1, 9, 9), seed=3)
    maps[0.0] = torch.zeros(1, 1, 1, 9, 9)
    res = rotation_average(lambda x: x, lambda a: maps[a], rotations=3)
    assert np.isnan(res.spearman[0, 1]) and np.isnan(res.spearman[0, 2])
    assert res.agreement == pytest.approx(res.spearman[1, 2], rel=1e-12)
    assert np.isfinite(res.agreement)


@pytest.mark.parametrize("bad", [0, -2, 2.0, True, "4"])
def test_bad_rotation_count_says_what_came(bad):
    with pytest.raises(InputError, match=r"^rotations: expected a positive integer, got "):
        rotation_average(lambda x: x, lambda a: a, rotations=bad)


def test_missing_resampler_names_the_helper():
    with pytest.raises(InputError, match=r"^rotations: give resample=callable\(rotation_deg\) -> x, "
                       r"e\.g\. explain\.attribution\.case_resampler\(case, spec\)$"):
        rotation_average(lambda x: x, None, rotations=2)


def test_rotation_average_repr_names_shape_angles_and_agreement():
    maps = _random_maps(2, shape=(1, 1, 1, 5, 5))
    res = rotation_average(lambda x: x, lambda a: maps[a], rotations=2)
    assert repr(res) == (f"RotationAverage(shape=(1, 1, 1, 5, 5), angles_deg=(0.0, 180.0), "
                         f"agreement={res.agreement:.3f} (mean Spearman))")
