"""Map similarity against its definitions: Spearman (scipy) and SSIM (Wang et al. 2004)."""

import numpy as np
import pytest
from scipy.stats import rankdata, spearmanr
from skimage.metrics import structural_similarity

from explain.errors import InputError
from explain.quality.similarity import spearman, stack_ssim


def test_spearman_is_pearson_of_ranks_and_matches_scipy():
    # Spearman's rho is Pearson's correlation of the ranks, mid-ranks for ties
    # (Spearman 1904; scipy.stats.spearmanr, scipy.stats.rankdata).
    rng = np.random.default_rng(3)
    a = rng.random((4, 5, 6))
    b = a + rng.normal(0, 0.3, a.shape)
    b[0, 0, :3] = b[0, 0, 0]  # ties
    by_ranks = np.corrcoef(rankdata(a.ravel()), rankdata(b.ravel()))[0, 1]
    got, why = spearman(a, b)
    assert why is None
    assert got == pytest.approx(by_ranks, abs=1e-12)
    assert got == pytest.approx(spearmanr(a.ravel(), b.ravel()).statistic, abs=1e-12)


def test_spearman_over_valid_elements_only():
    rng = np.random.default_rng(4)
    a, b = rng.random((3, 4, 4)), rng.random((3, 4, 4))
    valid = np.zeros((4, 4), bool)
    valid[1:3, :] = True
    got, _ = spearman(a, b, valid=valid)
    keep = np.broadcast_to(valid, a.shape)
    assert got == pytest.approx(spearmanr(a[keep], b[keep]).statistic, abs=1e-12)  # scipy


def test_spearman_undefined_cases_are_nan_with_a_reason():
    rho, why = spearman(np.zeros(10), np.arange(10.0))
    assert np.isnan(rho) and "constant" in why
    rho, why = spearman([1.0, 2.0], [2.0, 1.0])
    assert np.isnan(rho) and "2 elements" in why
    with pytest.raises(InputError, match="differ in shape"):
        spearman(np.zeros(3), np.zeros(4))


def _ssim_one_window(x, y, data_range):
    """SSIM of Wang, Bovik, Sheikh, Simoncelli 2004 (eq. 13) over one window, with
    C1 = (0.01 L)^2, C2 = (0.03 L)^2 and sample (ddof = 1) variances and covariance, as
    scikit-image computes them by default."""
    c1, c2 = (0.01 * data_range) ** 2, (0.03 * data_range) ** 2
    mx, my = x.mean(), y.mean()
    vx, vy = x.var(ddof=1), y.var(ddof=1)
    cxy = ((x - mx) * (y - my)).sum() / (x.size - 1)
    return ((2 * mx * my + c1) * (2 * cxy + c2)) / ((mx**2 + my**2 + c1) * (vx + vy + c2))


def test_stack_ssim_follows_the_published_formula_on_one_window():
    # A 7 x 7 x 7 stack with scikit-image's 7-wide window has exactly one full window.
    rng = np.random.default_rng(5)
    x = rng.random((7, 7, 7))
    y = 0.6 * x + 0.2 * rng.random((7, 7, 7))
    by_hand = _ssim_one_window(x, y, np.ptp(x))
    assert stack_ssim(x, y) == pytest.approx(by_hand, rel=1e-9)
    # and it is scikit-image's value with data_range from the original (not from both maps)
    assert stack_ssim(x, y) == pytest.approx(
        structural_similarity(x, y, data_range=np.ptp(x)), rel=1e-12)


def test_stack_ssim_uses_the_original_range_and_handles_small_or_flat_stacks():
    rng = np.random.default_rng(6)
    x = rng.random((8, 9, 9))
    assert stack_ssim(x, x) == pytest.approx(1.0)
    # a map on another scale is not rescaled to look alike
    assert stack_ssim(x, 100 * x) < 0.1
    small = rng.random((4, 9, 9))  # window 3 along the shortest side
    assert stack_ssim(small, small) == pytest.approx(1.0)
    assert np.isnan(stack_ssim(np.ones((8, 8, 8)), x[:, :8, :8]))
    assert np.isnan(stack_ssim(rng.random((2, 8, 8)), rng.random((2, 8, 8))))
