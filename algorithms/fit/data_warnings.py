"""Warnings about what the samples can tell a fit: too few samples, or no structure at their spacing.

Both are said in plain words with what to do; neither stops the fit. The thresholds are rules of
thumb (common practice), not published constants.
"""
from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

from ..model.covariance import CovarianceModel

FEW_SAMPLES = 30
"""Below this many samples a covariance model is poorly determined (common practice: variogram
estimation wants 50 to 100 samples or more)."""


def sample_size_warning(n: int) -> list[str]:
    """A warning when ``n`` is below :data:`FEW_SAMPLES`, else none."""
    if n >= FEW_SAMPLES:
        return []
    return [f"Only {n} samples: a covariance model is poorly determined from fewer than about {FEW_SAMPLES} "
            "(a rule of thumb; common practice asks for 50 to 100 samples or more to estimate a variogram). "
            "Read the fitted range, sill and nugget as rough guesses, keep the model simple (a fixed KERNEL such "
            "as exponential, ANISOTROPY off, TREND constant), and collect more samples before trusting a map."]


def median_neighbour_distance(xy: np.ndarray) -> float:
    """Median distance from each distinct sample to its nearest other sample (CRS units)."""
    distinct = np.unique(np.asarray(xy, dtype=float), axis=0)
    if len(distinct) < 2:
        return 0.0
    distance, _ = cKDTree(distinct).query(distinct, k=2)
    return float(np.median(distance[:, 1]))


def unresolved_structure_warning(covariance: CovarianceModel, xy: np.ndarray, units: str = "coordinate units"
                                 ) -> list[str]:
    """A warning when every structure's effective range lies below the typical sample spacing.

    The typical spacing is the median nearest-neighbour distance. A correlation that dies out before
    the next sample is reached is not resolved by the data: neighbouring samples are about
    uncorrelated, and kriging gives about the mean between them.
    """
    spacing = median_neighbour_distance(xy)
    reach = max(structure.effective_range for structure in covariance.structures)
    if not reach < spacing:
        return []
    return [f"The fitted correlation reaches only {reach:.4g} {units} (effective range), less than the typical "
            f"distance between neighbouring samples ({spacing:.4g} {units}, the median distance to the nearest "
            "sample): the data resolve no spatial structure, neighbouring samples are about uncorrelated, and a "
            "map from this model shows little more than the mean. Check that FIELD is the attribute you meant, "
            "or sample more densely where the map matters."]


def data_warnings(xy: np.ndarray, covariance: CovarianceModel, units: str = "coordinate units") -> list[str]:
    """:func:`sample_size_warning` and :func:`unresolved_structure_warning` of a chosen model (distances in
    ``units``, the coordinates' unit)."""
    return sample_size_warning(len(xy)) + unresolved_structure_warning(covariance, xy, units)
