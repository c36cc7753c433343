"""Localisation metrics on attribution arrays of any shape.

Pure functions on NumPy arrays; ``attribution`` and ``mask`` have the same shape. Each returns a
:class:`Score`: a value, or NaN with the reason it could not be computed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from explain.errors import InputError


@dataclass(frozen=True)
class Score:
    """A metric value, or NaN with a reason.

    Attributes
    ----------
    value : float
        The metric, or NaN.
    reason : str or None
        Why ``value`` is NaN; None when it is a number.
    """

    value: float
    reason: str | None = None

    def __float__(self) -> float:
        return self.value


def _check(attribution: np.ndarray, mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    a = np.asarray(attribution, dtype=float)
    m = np.asarray(mask, dtype=bool)
    if a.shape != m.shape:
        raise InputError(
            f"attribution has shape {a.shape} but mask has shape {m.shape}; pass arrays of one shape"
        )
    if not np.all(np.isfinite(a)):
        raise InputError("attribution holds NaN or infinite values; pass a finite map")
    return a, m


def relevance_mass_accuracy(attribution: np.ndarray, mask: np.ndarray) -> Score:
    """Positive attribution inside the mask over all positive attribution.

    Arras, Osman, Samek 2022 ("CLEVR-XAI"). Negative values count as zero.

    Parameters
    ----------
    attribution : numpy.ndarray
        Attribution map, any shape, arbitrary units.
    mask : numpy.ndarray
        Boolean mask of the same shape.

    Returns
    -------
    Score
        In [0, 1]; NaN when the mask is empty or no element is positive.

    Examples
    --------
    >>> float(relevance_mass_accuracy(np.array([3.0, 1.0, -2.0]), np.array([1, 0, 1])))
    0.75
    """
    a, m = _check(attribution, mask)
    if not m.any():
        return Score(math.nan, "empty mask")
    positive = np.clip(a, 0.0, None)
    total = float(positive.sum())
    if total <= 0.0:
        return Score(math.nan, "no positive attribution")
    return Score(float(positive[m].sum()) / total)


def relevance_rank_accuracy(attribution: np.ndarray, mask: np.ndarray) -> Score:
    """Of the K highest-attribution elements, K the mask's size, the fraction inside the mask.

    Arras, Osman, Samek 2022. Ties at the K-th value are shared: the elements strictly above it
    count fully, and the places left are split evenly among all elements equal to it, so the
    result does not depend on element order.

    Parameters
    ----------
    attribution : numpy.ndarray
        Attribution map, any shape.
    mask : numpy.ndarray
        Boolean mask of the same shape.

    Returns
    -------
    Score
        In [0, 1]; NaN when the mask is empty or no element is positive.

    Examples
    --------
    >>> float(relevance_rank_accuracy(np.array([3.0, 1.0, 1.0, 0.5]), np.array([1, 1, 0, 0])))
    0.75
    """
    a, m = _check(attribution, mask)
    k = int(m.sum())
    if k == 0:
        return Score(math.nan, "empty mask")
    if not np.any(a > 0):
        return Score(math.nan, "no positive attribution")
    flat, inside = a.ravel(), m.ravel()
    kth = np.sort(flat)[::-1][k - 1]
    above = flat > kth
    tied = flat == kth
    share = (k - int(above.sum())) / int(tied.sum())
    hits = int((above & inside).sum()) + share * int((tied & inside).sum())
    return Score(hits / k)


def pointing_game(attribution: np.ndarray, mask: np.ndarray, *, tolerance_mm: float = 0,
                  spacing_mm=1.0) -> Score:
    """Is the largest element in the mask, or within ``tolerance_mm`` of it?

    Zhang et al. 2018 ("Top-down neural attention by excitation backprop"). Distance is
    Euclidean in mm, with ``spacing_mm`` the size of one element step along each axis. On a tie
    for the largest value, it is a hit when any of the tied elements is.

    Parameters
    ----------
    attribution : numpy.ndarray
        Attribution map, any shape.
    mask : numpy.ndarray
        Boolean mask of the same shape.
    tolerance_mm : float
        Allowed distance from the mask, mm; must be >= 0.
    spacing_mm : float or sequence of float
        Element spacing, mm: one value for every axis or one per axis (array order), each > 0.
        The default of 1 mm makes the tolerance a count of element steps.

    Returns
    -------
    Score
        1.0 for a hit, 0.0 for a miss; NaN when the mask is empty or no element is positive.

    Examples
    --------
    >>> float(pointing_game(np.array([0.0, 0.0, 2.0]), np.array([1, 0, 0]), tolerance_mm=1,
    ...                     spacing_mm=0.5))
    1.0
    """
    a, m = _check(attribution, mask)
    if not (tolerance_mm >= 0):
        raise InputError(f"tolerance_mm must be >= 0, got {tolerance_mm}; pass a distance in mm")
    spacing = np.asarray(spacing_mm, dtype=float).ravel()
    if spacing.size not in (1, a.ndim) or not np.all(spacing > 0):
        raise InputError(f"spacing_mm must be one value > 0 or one per axis ({a.ndim}), "
                         f"got {spacing_mm!r}; pass the element spacing in mm")
    if not m.any():
        return Score(math.nan, "empty mask")
    if not np.any(a > 0):
        return Score(math.nan, "no positive attribution")
    peaks = a == a.max()
    if tolerance_mm == 0:
        return Score(float(np.any(peaks & m)))
    sampling = tuple(np.broadcast_to(spacing, (a.ndim,)))
    distance = ndimage.distance_transform_edt(~m, sampling=sampling)
    return Score(float(np.any(distance[peaks] <= tolerance_mm)))
