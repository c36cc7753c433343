"""Array metrics against Quantus 0.6 (Hedstroem et al. 2023) and the papers' definitions."""

import math

import numpy as np
import pytest

from explain.errors import InputError
from explain.quality import pointing_game, relevance_mass_accuracy, relevance_rank_accuracy

quantus = pytest.importorskip("quantus")

SHAPES = [(12, 10), (6, 7, 5)]


def _batch(shape, seed):
    rng = np.random.default_rng(seed)
    a = rng.random((4, 1) + shape)  # non-negative, continuous: no ties, definitions coincide
    s = (rng.random((4, 1) + shape) < 0.3).astype(float)
    x = rng.random((4, 1) + shape)
    y = np.zeros(4, dtype=int)
    return x, y, a, s


def _quantus(metric, shape, seed):
    x, y, a, s = _batch(shape, seed)
    # Quantus 0.6 takes only 2-D images; these metrics look at elements, not neighbours, so a
    # volume is handed over folded into a 2-D image (D*H, W) and our functions get the 3-D array.
    fold = (len(a), 1, -1, shape[-1])
    got = metric(disable_warnings=True, abs=False, normalise=False)(
        model=None, x_batch=x.reshape(fold), y_batch=y, a_batch=a.reshape(fold),
        s_batch=s.reshape(fold),
    )
    return a, s, np.asarray(got, dtype=float)


@pytest.mark.parametrize("shape", SHAPES)
def test_mass_accuracy_matches_quantus_RelevanceMassAccuracy(shape):
    # Quantus 0.6 RelevanceMassAccuracy (Arras, Osman, Samek 2022)
    a, s, expected = _quantus(quantus.RelevanceMassAccuracy, shape, 1)
    ours = [float(relevance_mass_accuracy(a[i, 0], s[i, 0] > 0)) for i in range(len(a))]
    np.testing.assert_allclose(ours, expected, rtol=1e-9)


@pytest.mark.parametrize("shape", SHAPES)
def test_rank_accuracy_matches_quantus_RelevanceRankAccuracy(shape):
    # Quantus 0.6 RelevanceRankAccuracy (Arras, Osman, Samek 2022)
    a, s, expected = _quantus(quantus.RelevanceRankAccuracy, shape, 2)
    ours = [float(relevance_rank_accuracy(a[i, 0], s[i, 0] > 0)) for i in range(len(a))]
    np.testing.assert_allclose(ours, expected, rtol=1e-9)


@pytest.mark.parametrize("shape", SHAPES)
def test_pointing_game_matches_quantus_PointingGame(shape):
    # Quantus 0.6 PointingGame (Zhang et al. 2018)
    a, s, expected = _quantus(quantus.PointingGame, shape, 3)
    ours = [float(pointing_game(a[i, 0], s[i, 0] > 0)) for i in range(len(a))]
    np.testing.assert_array_equal(ours, expected.astype(float))


def test_empty_mask_and_no_positive_give_nan_with_reason():
    a = np.ones((3, 3))
    for metric in (relevance_mass_accuracy, relevance_rank_accuracy, pointing_game):
        empty = metric(a, np.zeros((3, 3), bool))
        assert math.isnan(empty.value) and empty.reason == "empty mask"
        flat = metric(-a, np.ones((3, 3), bool))
        assert math.isnan(flat.value) and flat.reason == "no positive attribution"


def test_rank_ties_are_shared_by_hand():
    # worked by hand: K=2, values [2,1,1,1]; 2 is inside, one place left for three tied 1s,
    # one of which is inside -> (1 + 1/3) / 2
    got = relevance_rank_accuracy(np.array([2.0, 1, 1, 1]), np.array([1, 1, 0, 0], bool))
    assert got.value == pytest.approx(2 / 3)


def test_pointing_tolerance_in_mm_by_hand():
    # worked by hand: a 3-4-5 triangle, 5 element steps at 1 mm, 2.5 mm at 0.5 mm
    a = np.zeros((5, 5))
    a[0, 0] = 1.0
    m = np.zeros((5, 5), bool)
    m[3, 4] = True
    assert pointing_game(a, m, tolerance_mm=4.9).value == 0.0
    assert pointing_game(a, m, tolerance_mm=5).value == 1.0
    assert pointing_game(a, m, tolerance_mm=2.4, spacing_mm=0.5).value == 0.0
    assert pointing_game(a, m, tolerance_mm=2.5, spacing_mm=0.5).value == 1.0
    # anisotropic: rows 2 mm, columns 0.75 mm -> sqrt(6^2 + 3^2) = 6.708 mm
    assert pointing_game(a, m, tolerance_mm=6.70, spacing_mm=(2.0, 0.75)).value == 0.0
    assert pointing_game(a, m, tolerance_mm=6.71, spacing_mm=(2.0, 0.75)).value == 1.0
    with pytest.raises(InputError, match="tolerance_mm"):
        pointing_game(a, m, tolerance_mm=-1)
    with pytest.raises(InputError, match="spacing_mm"):
        pointing_game(a, m, tolerance_mm=1, spacing_mm=(1.0, 1.0, 1.0))
    with pytest.raises(InputError, match="spacing_mm"):
        pointing_game(a, m, tolerance_mm=1, spacing_mm=0)


def test_shape_mismatch_is_input_error():
    with pytest.raises(InputError, match="shape"):
        relevance_mass_accuracy(np.ones(3), np.ones(4, bool))
