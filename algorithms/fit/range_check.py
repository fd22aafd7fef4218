"""A fitted range longer than the study while the data level off well inside it: a sign of a trend.

A likelihood fit with a constant mean explains a mean that drifts across the area as correlation over long
distances, so its range can run far past the samples while the empirical semivariogram of the residuals
levels off at a fraction of the study size. :func:`range_warning` compares the two and returns advice.

Study size: the largest distance between two samples. The semivariogram is estimated up to half of it
(common practice: beyond that few pairs remain and they come from the edges of the area), over 15 lags. Its
level is the mean over the lags beyond a quarter of the study size; it "levels off" at the first lag that
reaches :data:`LEVEL_SHARE` of that level, and "well inside" the study means before a quarter of the study
size (both our choice).
"""
from __future__ import annotations

import numpy as np
from scipy.spatial import ConvexHull, QhullError
from scipy.spatial.distance import pdist

from .options import FitResult
from .variogram import empirical_semivariogram

LEVEL_SHARE = 0.9
"""Share of the far-lag level at which the empirical semivariogram counts as levelled off."""
MOST_SAMPLES = 3000
"""Most samples the semivariogram of the check uses (evenly spaced in input order above that), to bound its pairs."""


def study_size(xy: np.ndarray) -> float:
    """Largest distance between two samples (CRS units), from the convex hull's vertices."""
    points = np.unique(np.asarray(xy, dtype=float), axis=0)
    if len(points) < 2:
        return 0.0
    try:
        points = points[ConvexHull(points).vertices]
    except QhullError:  # on one line: the extreme pair lies among the bounding points
        points = points[[np.argmin(points[:, 0]), np.argmax(points[:, 0]), np.argmin(points[:, 1]),
                         np.argmax(points[:, 1])]]
    return float(pdist(points).max())


def levelling_distance(xy: np.ndarray, residuals: np.ndarray, size: float) -> float | None:
    """Lag distance where the semivariogram of ``residuals`` first reaches :data:`LEVEL_SHARE` of its far level
    (CRS units); None when it has no far lags with pairs or never reaches it."""
    step = max(1, -(-len(xy) // MOST_SAMPLES))
    variogram = empirical_semivariogram(xy[::step], residuals[::step], n_lags=15, cutoff=size / 2)
    filled = variogram.pairs > 0
    far = filled & (variogram.distance > size / 4)
    if not far.any():
        return None
    level = float(np.mean(variogram.gamma[far]))
    reached = filled & (variogram.gamma >= LEVEL_SHARE * level)
    return float(variogram.distance[reached][0]) if reached.any() else None


def range_warning(xy: np.ndarray, values: np.ndarray, result: FitResult, units: str = "metre",
                  covariates: np.ndarray | None = None) -> str | None:
    """Advice when the fitted effective range exceeds the study size while the residuals' empirical semivariogram
    levels off within a quarter of it; None otherwise. ``covariates`` are the mean's covariate columns at the
    samples, when it names any.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        The samples fitted (CRS units).
    values : ndarray of shape (n,)
        Their values in the modelling scale.
    result : FitResult
        The fit; residuals are ``values - F beta`` from its mean.
    units : str
        CRS unit, for the message.
    """
    size = study_size(xy)
    reach = max(structure.effective_range for structure in result.covariance.structures)
    if not size > 0 or reach <= size:
        return None
    residuals = np.asarray(values, dtype=float) - result.mean.design(xy, covariates) @ result.coefficients
    level = levelling_distance(np.asarray(xy, dtype=float), residuals, size)
    if level is None or level >= size / 4:
        return None
    trend = {"known": "TREND = linear or quadratic", "constant": "TREND = linear or quadratic",
             "linear": "TREND = quadratic"}.get(result.mean.kind,
                                               "KERNEL = spherical (a family whose correlation ends at its range)")
    return (f"The fitted effective range ({reach:,.0f} {units}) exceeds the study size ({size:,.0f} {units}, the "
            f"largest distance between samples), while the empirical semivariogram of the residuals levels off "
            f"near {level:,.0f} {units}. A range beyond the data usually stands for a mean that drifts across the "
            f"area: refit with {trend} and compare the fits by cross-validation ('Cross-validate model'); "
            "predictions far from the samples follow this long range.")
