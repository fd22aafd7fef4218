"""Empirical semivariograms, omnidirectional and directional.

For distance lags ``L_j = (e_j, e_{j+1}]`` (CRS units) the classical
estimator (Matheron 1962, *Traité de géostatistique appliquée*; Cressie
1993, *Statistics for Spatial Data*, eq. 2.4.2) is::

    gamma_j = 1 / (2 N_j) * sum over pairs (i, k) in L_j of (z_i - z_k)**2

where ``N_j`` counts the unordered pairs of samples whose separation
distance falls in ``L_j`` and, for a directional semivariogram, whose
separation direction lies within ``tolerance`` degrees of ``azimuth``.
Directions are in degrees clockwise from grid north, folded to [0, 180)
because the pairs (i, k) and (k, i) are the same. Pairs at distance zero
(coincident samples) have no direction and fall in no lag; merge them
first with :func:`.samples.merge_coincident`.

Every lag is reported, also the empty ones: an empty lag has ``pairs = 0``,
``gamma = nan`` and ``distance`` at the middle of the lag.

:func:`.variogram_fit.fit_wls` fits a covariance model to these estimates.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import FieldcastError
from ..io.samples import check_samples

PAIRS_PER_BLOCK = 1_000_000
"""Largest number of sample pairs held in memory at once."""


@dataclass(frozen=True)
class EmpiricalVariogram:
    """Semivariance estimates over distance lags.

    Attributes
    ----------
    distance : ndarray of shape (n_lags,)
        Mean separation distance of the pairs in each lag (CRS units); the
        lag middle for an empty lag.
    gamma : ndarray of shape (n_lags,)
        Semivariance estimate (attribute units squared); nan for an empty lag.
    pairs : ndarray of shape (n_lags,)
        Number of pairs in each lag.
    lag_edges : ndarray of shape (n_lags + 1,)
        Lag boundaries from 0 to ``cutoff`` (CRS units); lag ``j`` holds the
        distances in ``(lag_edges[j], lag_edges[j + 1]]``.
    azimuth : float or None
        Direction in degrees clockwise from north, [0, 180); None for the
        omnidirectional semivariogram.
    tolerance : float
        Half-width of the angular window in degrees; 90 (every direction)
        for the omnidirectional semivariogram.
    cutoff : float
        Largest separation distance used (CRS units).
    """

    distance: np.ndarray
    gamma: np.ndarray
    pairs: np.ndarray
    lag_edges: np.ndarray
    azimuth: float | None
    tolerance: float
    cutoff: float


def default_cutoff(xy: np.ndarray) -> float:
    """One third of the diagonal of the samples' bounding box (CRS units).

    Common practice: beyond about a third of the extent few pairs remain
    and they come mostly from the edges of the study area.
    """
    xy = np.asarray(xy, dtype=float)
    extent = xy.max(axis=0) - xy.min(axis=0)
    return float(np.hypot(extent[0], extent[1])) / 3.0


def _check_lags(xy: np.ndarray, n_lags: int, cutoff: float | None) -> float:
    """Validate the lag settings and return the cutoff to use."""
    if int(n_lags) != n_lags or n_lags < 1:
        raise FieldcastError(f"The number of lags must be a whole number of 1 or more; got {n_lags!r}.")
    if cutoff is None:
        cutoff = default_cutoff(xy)
        if not cutoff > 0:
            raise FieldcastError("All samples are at the same location; a semivariogram needs samples apart.")
    elif not (math.isfinite(cutoff) and cutoff > 0):
        raise FieldcastError(f"The cutoff must be a positive distance in CRS units; got {cutoff!r}.")
    return float(cutoff)


def _check_direction(azimuth: float, tolerance: float) -> float:
    """Validate a direction and return its azimuth folded to [0, 180)."""
    if not math.isfinite(azimuth):
        raise FieldcastError(f"The azimuth must be a finite angle in degrees; got {azimuth!r}.")
    if not 0 < tolerance <= 90:
        raise FieldcastError(f"The angular tolerance must be between 0 and 90 degrees; got {tolerance!r}.")
    return float(azimuth) % 180.0


def _lag_sums(
    xy: np.ndarray, values: np.ndarray, edges: np.ndarray, directions: list[tuple[float, float]]
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pair counts, sums of distances and sums of squared differences per direction and lag.

    ``directions`` holds ``(azimuth, tolerance)`` in degrees. Pairs are
    visited in blocks of rows so that at most about
    :data:`PAIRS_PER_BLOCK` are held at once. Returns three arrays of shape
    ``(len(directions), len(edges) - 1)``.
    """
    n, n_lags = len(xy), len(edges) - 1
    counts = np.zeros((len(directions), n_lags))
    distance_sums = np.zeros_like(counts)
    square_sums = np.zeros_like(counts)
    rows_per_block = max(1, PAIRS_PER_BLOCK // max(n, 1))
    for start in range(0, n - 1, rows_per_block):
        stop = min(start + rows_per_block, n - 1)
        # Row i pairs with columns k > i only, so every unordered pair is seen once.
        row = np.arange(start, stop)[:, None]
        column = np.arange(start, n)[None, :]
        upper = column > row
        dx = (xy[start:stop, 0:1] - xy[None, start:, 0])[upper]
        dy = (xy[start:stop, 1:2] - xy[None, start:, 1])[upper]
        h = np.hypot(dx, dy)
        lag = np.searchsorted(edges, h, side="left") - 1
        in_range = (lag >= 0) & (lag < n_lags)
        dx, dy, h, lag = dx[in_range], dy[in_range], h[in_range], lag[in_range]
        squares = ((values[start:stop, None] - values[None, start:]) ** 2)[upper][in_range]
        pair_azimuth = np.degrees(np.arctan2(dx, dy)) % 180.0
        for d, (azimuth, tolerance) in enumerate(directions):
            # Angle between the pair direction and the azimuth, folded to [0, 90].
            gap = np.abs((pair_azimuth - azimuth + 90.0) % 180.0 - 90.0)
            keep = gap <= tolerance
            counts[d] += np.bincount(lag[keep], minlength=n_lags)
            distance_sums[d] += np.bincount(lag[keep], weights=h[keep], minlength=n_lags)
            square_sums[d] += np.bincount(lag[keep], weights=squares[keep], minlength=n_lags)
    return counts, distance_sums, square_sums


def _semivariograms(
    xy: np.ndarray, values: np.ndarray, directions: list[tuple[float | None, float]], n_lags: int,
    cutoff: float | None,
) -> list[EmpiricalVariogram]:
    """Semivariograms for several ``(azimuth or None, tolerance)`` directions in one pass over the pairs."""
    check_samples(xy, values, minimum=2)
    xy = np.asarray(xy, dtype=float)
    values = np.asarray(values, dtype=float)
    cutoff = _check_lags(xy, n_lags, cutoff)
    edges = np.linspace(0.0, cutoff, int(n_lags) + 1)
    windows = [(0.0, 90.0) if azimuth is None else (azimuth, tolerance) for azimuth, tolerance in directions]
    counts, distance_sums, square_sums = _lag_sums(xy, values, edges, windows)
    middle = 0.5 * (edges[:-1] + edges[1:])
    filled = counts > 0
    safe_counts = np.where(filled, counts, 1.0)
    distance = np.where(filled, distance_sums / safe_counts, middle)
    gamma = np.where(filled, square_sums / (2.0 * safe_counts), np.nan)
    return [
        EmpiricalVariogram(distance[d], gamma[d], counts[d].astype(int), edges.copy(), directions[d][0],
                           windows[d][1], cutoff)
        for d in range(len(directions))
    ]


def empirical_semivariogram(
    xy: np.ndarray, values: np.ndarray, *, n_lags: int = 15, cutoff: float | None = None,
    azimuth: float | None = None, tolerance: float = 22.5,
) -> EmpiricalVariogram:
    """Classical (Matheron) semivariogram estimate over ``n_lags`` equal lags up to ``cutoff``.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations in CRS units.
    values : ndarray of shape (n,)
        Sample values in the modelling scale (residuals from a trend, if any).
    n_lags : int
        Number of equal-width distance lags.
    cutoff : float, optional
        Largest separation distance (CRS units); :func:`default_cutoff` when None.
    azimuth : float, optional
        Direction in degrees clockwise from north for a directional
        semivariogram; None for the omnidirectional one.
    tolerance : float
        Half-width of the angular window in degrees, in (0, 90]; ignored
        when ``azimuth`` is None.

    Returns
    -------
    EmpiricalVariogram
    """
    if azimuth is not None:
        azimuth = _check_direction(azimuth, tolerance)
    return _semivariograms(xy, values, [(azimuth, tolerance)], n_lags, cutoff)[0]


def directional_semivariograms(
    xy: np.ndarray, values: np.ndarray, azimuths: tuple[float, ...] = (0, 45, 90, 135),
    tolerance: float = 22.5, *, n_lags: int = 15, cutoff: float | None = None,
) -> list[EmpiricalVariogram]:
    """Directional semivariograms, one per azimuth, from a single pass over the sample pairs.

    ``n_lags`` and ``cutoff`` are as in :func:`empirical_semivariogram`.
    """
    if not len(azimuths):
        raise FieldcastError("Give at least one azimuth for directional semivariograms.")
    directions = [(_check_direction(a, tolerance), float(tolerance)) for a in azimuths]
    return _semivariograms(xy, values, directions, n_lags, cutoff)


def residual_semivariograms(xy: np.ndarray, residuals: np.ndarray) -> list[EmpiricalVariogram]:
    """The omnidirectional semivariogram of ``residuals`` and the four directional ones (0, 45, 90, 135 degrees),
    as the fit report draws them (``residuals = values - F beta`` from the fitted mean, modelling scale)."""
    return [empirical_semivariogram(xy, residuals), *directional_semivariograms(xy, residuals)]
