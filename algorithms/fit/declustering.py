"""Cell declustering: weights for samples taken closer together in some places than in others.

Cell declustering (Journel 1983, *Math. Geol.* 15(3), 445-468; Deutsch & Journel 1998): lay a grid of square
cells of side ``c`` over the samples, from an origin at the smallest easting and northing shifted by
``-k c / K`` in both directions (``k = 0 .. K-1``, :data:`ORIGIN_SHIFTS` origins). A sample in a cell that holds
``n_j`` samples, among ``L`` occupied cells, gets the weight ``1 / (L n_j)``: every occupied cell counts the
same, its samples share it. The weights of the ``K`` origins are averaged and scaled to a mean of 1.

The cell size: the one of :data:`CANDIDATE_SIZES` sizes from the median nearest-neighbour spacing to half
the longer side of the samples' bounding box that gives the smallest declustered mean (common practice, a
rule of thumb: it suits surveys that sampled high values — hot spots — more densely; it would be the largest
mean for surveys that sampled low values more densely, which this choice does not cover).

Strong clustering is flagged (our thresholds, rules of thumb) when either the Clark-Evans nearest-neighbour
index ``R`` (Clark & Evans 1954, *Ecology* 35(4), 445-453: the mean distance to the nearest sample over
``0.5 / sqrt(n / A)``, its expectation for samples placed at random over the area ``A``, here the bounding box;
``R = 1`` random, ``R -> 0`` clustered) is below :data:`CLUSTERED_INDEX`, or the effective number of samples of
the declustering weights, ``(sum w)^2 / sum w^2`` (Kish 1965, *Survey Sampling*), is below
:data:`CLUSTERED_SHARE` of ``n``: a few dense patches in an even survey leave ``R`` near 1 but the weights very
unequal.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from ..errors import FieldcastError

ORIGIN_SHIFTS = 5
"""Origins averaged per cell size."""
CANDIDATE_SIZES = 24
"""Cell sizes tried."""
CLUSTERED_INDEX = 0.5
"""Clark-Evans index below which the log warns of strongly clustered sampling."""
CLUSTERED_SHARE = 0.5
"""Effective number of samples, as a share of ``n``, below which the log warns of strongly clustered sampling."""
HISTOGRAM_BINS = 12


def cell_weights(xy: np.ndarray, size: float, shifts: int = ORIGIN_SHIFTS) -> np.ndarray:
    """Cell-declustering weights (mean 1) of the samples ``xy`` (n, 2) for square cells of side ``size``.

    See the module notes: ``1 / (L n_j)`` per origin, averaged over ``shifts`` origins, scaled to mean 1.
    """
    xy = np.asarray(xy, dtype=float)
    origin = xy.min(axis=0)
    total = np.zeros(len(xy))
    for k in range(shifts):
        cells = np.floor((xy - (origin - k * size / shifts)) / size).astype(np.int64)
        key = cells[:, 0] * (int(cells[:, 1].max()) + 1) + cells[:, 1]  # one number per cell: a 1-D unique is fast
        _, which, counts = np.unique(key, return_inverse=True, return_counts=True)
        total += 1.0 / (len(counts) * counts[which.ravel()])
    return total * len(xy) / total.sum()


@dataclass(frozen=True)
class Declustering:
    """What cell declustering found.

    Attributes
    ----------
    weights : ndarray of shape (n,)
        Weights of the samples, mean 1.
    cell_size : float
        Side of the chosen cells (CRS units); 0 when all samples lie at one place (equal weights).
    raw_mean, declustered_mean : float
        Mean of the values, unweighted and weighted.
    clark_evans : float
        Nearest-neighbour index of the sample locations (NaN for fewer than three distinct places).
    sizes, means : ndarray
        Cell sizes tried and their declustered means.
    """

    weights: np.ndarray
    cell_size: float
    raw_mean: float
    declustered_mean: float
    clark_evans: float
    sizes: np.ndarray
    means: np.ndarray

    @property
    def effective_share(self) -> float:
        """The weights' effective number of samples ``(sum w)^2 / sum w^2`` over ``n`` (1 for equal weights)."""
        return float(self.weights.sum() ** 2 / np.sum(self.weights**2) / len(self.weights))

    @property
    def clustered(self) -> bool:
        """Whether the sampling is strongly clustered by the rules of the module notes."""
        return bool(self.clark_evans < CLUSTERED_INDEX or self.effective_share < CLUSTERED_SHARE)

    def log_lines(self, units: str) -> list[str]:
        """The declustering in words for the log."""
        return [f"Cell declustering: cells of {self.cell_size:.4g} {units} (of {len(self.sizes)} sizes tried, the "
                f"one with the smallest declustered mean, a rule of thumb for surveys that sampled high values more "
                f"densely); declustered mean {self.declustered_mean:.4g} against the raw mean {self.raw_mean:.4g}; "
                f"weights {self.weights.min():.3g} to {self.weights.max():.3g} (worth "
                f"{100 * self.effective_share:.0f} % of the samples); nearest-neighbour index {self.clark_evans:.2f} "
                "(1 = random, 0 = clustered)."]

    def warning(self) -> str | None:
        """The warning of strongly clustered sampling, or None."""
        if not self.clustered:
            return None
        return (f"The samples are strongly clustered (nearest-neighbour index {self.clark_evans:.2f}, warned below "
                f"{CLUSTERED_INDEX:g}; declustering weights worth {100 * self.effective_share:.0f} % of the samples, "
                f"warned below {100 * CLUSTERED_SHARE:g} %; rules of thumb): the raw mean {self.raw_mean:.4g} and "
                "histogram may say more about where samples were taken than about the field (declustered mean "
                f"{self.declustered_mean:.4g}). Consider the normalscore transform, which uses the declustering "
                "weights, and read the fit report's declustered histogram.")

    def histogram(self, values: np.ndarray) -> dict[str, list[float]]:
        """Raw and declustered histograms of ``values`` (fractions per bin) on :data:`HISTOGRAM_BINS` shared bins."""
        values = np.asarray(values, dtype=float)
        edges = np.histogram_bin_edges(values, HISTOGRAM_BINS)
        raw = np.histogram(values, edges)[0] / len(values)
        weighted = np.histogram(values, edges, weights=self.weights)[0] / self.weights.sum()
        return {"edges": edges.tolist(), "raw": raw.tolist(), "declustered": weighted.tolist()}


def decluster(xy: np.ndarray, values: np.ndarray, sizes: np.ndarray | None = None,
              shifts: int = ORIGIN_SHIFTS) -> Declustering:
    """Cell-declustering weights of samples at ``xy`` (n, 2) with ``values`` (n,), cell size chosen as the module
    notes say (or among ``sizes``, CRS units), the weights averaged over ``shifts`` origins.

    Raises
    ------
    FieldcastError
        If ``sizes`` holds a size that is not a positive finite number.
    """
    xy = np.asarray(xy, dtype=float)
    values = np.asarray(values, dtype=float)
    places = np.unique(xy, axis=0)
    raw_mean = float(values.mean())
    index = clark_evans(places)
    if len(places) < 2:
        return Declustering(np.ones(len(values)), 0.0, raw_mean, raw_mean, index, np.zeros(0), np.zeros(0))
    if sizes is None:
        spacing = float(np.median(cKDTree(places).query(places, k=2)[0][:, 1]))
        longest = float(np.max(np.ptp(places, axis=0)))
        sizes = np.linspace(spacing, max(spacing, 0.5 * longest), CANDIDATE_SIZES)
    sizes = np.asarray(sizes, dtype=float)
    if not np.all(np.isfinite(sizes) & (sizes > 0)):
        raise FieldcastError("Declustering cell sizes must be positive numbers of CRS units.")
    weights = [cell_weights(xy, size, shifts) for size in sizes]
    means = np.array([float(np.mean(w * values)) for w in weights])
    best = int(np.argmin(means))
    return Declustering(weights[best], float(sizes[best]), raw_mean, float(means[best]), index, sizes, means)


def clark_evans(places: np.ndarray) -> float:
    """Clark-Evans index of distinct ``places`` (m, 2) over their bounding box; NaN for fewer than three places
    or a box of no area."""
    if len(places) < 3:
        return float("nan")
    area = float(np.prod(np.ptp(places, axis=0)))
    if area <= 0:
        return float("nan")
    nearest = cKDTree(places).query(places, k=2)[0][:, 1]
    return float(np.mean(nearest) / (0.5 / np.sqrt(len(places) / area)))
