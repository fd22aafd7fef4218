"""Sample preparation: merging coincident points and checking that data can be modelled.

Two samples at the same location make the covariance matrix of the data
singular when the model has no nugget, and they tell nothing about spatial
variation at any distance but zero. :func:`merge_coincident` replaces each
group of samples that lie within ``tolerance`` (CRS units) of one another
by a single sample carrying their average value (with per-sample
measurement-error variances, their inverse-variance weighted mean, see
:func:`merge_coincident`). :func:`check_error_variance` checks such
variances. :func:`check_samples`
stops with a message saying what to change when the data cannot be
modelled at all.
"""
from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from ..errors import FieldcastError
from ..model.covariance import MAX_SILL

LARGEST_VALUE = math.sqrt(MAX_SILL)
"""Largest magnitude of a sample value (modelling scale, 1e50): its square, the scale of the variances the model
is built of, stays within :data:`..model.covariance.MAX_SILL`; larger values overflow double precision."""


@dataclass(frozen=True)
class Samples:
    """Samples after merging coincident points.

    Attributes
    ----------
    xy : ndarray of shape (m, 2)
        Locations in CRS units; a merged sample sits at the location of the
        first sample of its group.
    values : ndarray of shape (m,)
        Values; a merged sample carries the mean of its group.
    ids : ndarray of shape (m,)
        Identifiers; a merged sample keeps the id of the first sample of its group.
    merged_groups : int
        Number of locations at which two or more input samples were merged.
    merged_points : int
        Number of input samples that went into those groups, so
        ``m = n - merged_points + merged_groups`` for ``n`` input samples.
    error_variance : ndarray of shape (m,) or None
        Measurement-error variance of each sample (modelling units squared) when the input had one; a merged
        sample carries the combined variance of its group (see :func:`merge_coincident`).
    censored : ndarray of bool, shape (m,), optional
        True where the value is a limit (the true value lies below it); None when no sample was censored.
    """

    xy: np.ndarray
    values: np.ndarray
    ids: np.ndarray
    merged_groups: int
    merged_points: int
    error_variance: np.ndarray | None = None
    censored: np.ndarray | None = None


def check_error_variance(error_variance: np.ndarray, n: int) -> np.ndarray:
    """Per-sample measurement-error variances as a float array (n,), refused unless finite and not negative.

    Raises
    ------
    FieldcastError
        For another shape, or a value that is missing, infinite, negative or beyond :data:`MAX_SILL`, naming the
        first row.
    """
    variance = np.asarray(error_variance, dtype=float)
    if variance.shape != (n,):
        raise FieldcastError(f"Expected one measurement-error variance per sample ({n}), got an array of shape "
                             f"{variance.shape}.")
    bad = np.flatnonzero(~((variance >= 0) & (variance <= MAX_SILL)))
    if len(bad):
        raise FieldcastError(f"{len(bad)} measurement-error variance(s) are missing, negative or not finite (first "
                             f"at row {bad[0]}: {variance[bad[0]]!r}); give every sample a variance of 0 or more "
                             "(modelling units squared), or leave the error variances out.")
    return variance


@dataclass(frozen=True)
class FeatureReadings:
    """Features read from a point layer, sorted into samples and the skipped.

    Attributes
    ----------
    xy : ndarray of shape (n, 2)
        Points of the features with a geometry and a finite value, in the layer's CRS.
    values : ndarray of shape (n,)
        Their values.
    kept : ndarray of int, shape (n,)
        Their positions in the order read.
    skipped_values, skipped_geometry : int
        Features left out for a NULL or non-finite value, and for no geometry.
    """

    xy: np.ndarray
    values: np.ndarray
    kept: np.ndarray
    skipped_values: int
    skipped_geometry: int

    @classmethod
    def sort(cls, readings: Iterable[tuple[tuple[float, float] | None, float]]) -> FeatureReadings:
        """Sort ``(point or None, value)`` pairs, one per feature in the order read (NaN for a NULL value)."""
        points, values, kept = [], [], []
        skipped_values = skipped_geometry = 0
        for position, (point, value) in enumerate(readings):
            if point is None:
                skipped_geometry += 1
            elif not math.isfinite(value):
                skipped_values += 1
            else:
                points.append(point)
                values.append(value)
                kept.append(position)
        return cls(np.array(points, dtype=float).reshape(-1, 2), np.array(values, dtype=float),
                   np.array(kept, dtype=np.int64), skipped_values, skipped_geometry)

    @property
    def skipped(self) -> dict[str, int]:
        """Features left out, by reason (only reasons that occurred)."""
        return {reason: count for reason, count in (("value is NULL or not a number", self.skipped_values),
                                                    ("no geometry", self.skipped_geometry)) if count}


def _sample_arrays(xy: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``xy`` as an (n, 2) and ``values`` as an (n,) float array, or a FieldcastError naming the shapes."""
    xy = np.asarray(xy, dtype=float)
    values = np.asarray(values, dtype=float)
    if xy.ndim != 2 or xy.shape[1] != 2:
        raise FieldcastError(
            f"Sample coordinates must be an (n, 2) array of easting and northing; got shape {xy.shape}. "
            "Use a point layer (multipoints are not supported)."
        )
    if values.shape != (len(xy),):
        raise FieldcastError(f"Expected one value per sample ({len(xy)}), got an array of shape {values.shape}.")
    return xy, values


def merge_coincident(
    xy: np.ndarray, values: np.ndarray, ids: np.ndarray | None = None, tolerance: float = 0.0,
    error_variance: np.ndarray | None = None,
    censored: np.ndarray | None = None,
) -> Samples:
    """Average the values of samples that share a location.

    Two samples belong to the same group when they are at most
    ``tolerance`` apart; groups are closed under this relation (single
    linkage), so a chain of samples each within ``tolerance`` of the next
    forms one group even if its ends are further apart. Groups are listed in
    the order of their first sample. The inputs are not modified.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations in CRS units; must be finite.
    values : ndarray of shape (n,)
        Sample values (modelling scale).
    ids : ndarray of shape (n,), optional
        Sample identifiers; defaults to ``0 .. n-1``.
    tolerance : float
        Largest distance (CRS units) at which two samples count as the same
        location; 0 merges exact duplicates only.
    error_variance : ndarray of shape (n,), optional
        Measurement-error variance of each sample (modelling units squared). A group then merges to the
        inverse-variance weighted mean ``sum(y_i / e_i) / sum(1 / e_i)`` with the combined variance
        ``1 / sum(1 / e_i)`` (the best linear unbiased combination of independent measurements of one value);
        members with variance 0 are exact, and a group holding any merges to their plain mean with variance 0.
    censored : ndarray of bool, shape (n,), optional
        True where the value is a limit. A group with a censored member is censored at the mean of its values
        and limits: each true value lies at or below its entry, so their mean lies below the mean of the
        entries, and so does any weighted mean (the one with error variances too): the only statement the data
        make; a detected value in the group is not kept apart.

    Returns
    -------
    Samples
    """
    xy, values = _sample_arrays(xy, values)
    n = len(xy)
    if error_variance is not None:
        error_variance = check_error_variance(error_variance, n)
    ids = np.arange(n) if ids is None else np.asarray(ids)
    if ids.shape != (n,):
        raise FieldcastError(f"Expected one id per sample ({n}), got an array of shape {ids.shape}.")
    if not (math.isfinite(tolerance) and tolerance >= 0):
        raise FieldcastError(
            f"The merge tolerance must be a distance of 0 or more (CRS units); got {tolerance!r}."
        )
    if not np.all(np.isfinite(xy)):
        raise FieldcastError(
            "Some samples have missing or infinite coordinates; drop those features or repair their geometry."
        )
    flags = None if censored is None else np.asarray(censored, dtype=bool)
    if flags is not None and flags.shape != (n,):
        raise FieldcastError(f"Expected one censored flag per sample ({n}), got an array of shape {flags.shape}.")
    if n == 0:
        return Samples(xy.copy(), values.copy(), ids.copy(), 0, 0,
                       None if error_variance is None else error_variance.copy(),
                       None if flags is None else flags.copy())

    label = _group_labels(xy, float(tolerance))
    # Renumber groups in the order of their first sample.
    _, first_index, group = np.unique(label, return_index=True, return_inverse=True)
    group = group.ravel()  # numpy 2.0 and 2.1 give the inverse the input's shape
    order = np.argsort(first_index)
    rank = np.empty_like(order)
    rank[order] = np.arange(len(order))
    group = rank[group]
    first_index = first_index[order]

    size = np.bincount(group)
    merged = size > 1
    if error_variance is None:
        mean_value, combined = np.bincount(group, weights=values) / size, None
    else:
        mean_value, combined = _inverse_variance_means(group, values, error_variance)
    return Samples(
        xy=xy[first_index].copy(),
        values=mean_value,
        ids=ids[first_index].copy(),
        merged_groups=int(np.count_nonzero(merged)),
        merged_points=int(size[merged].sum()),
        error_variance=combined,
        censored=None if flags is None else np.bincount(group, weights=flags) > 0,
    )


def _inverse_variance_means(group: np.ndarray, values: np.ndarray,
                            error_variance: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per group, the inverse-variance weighted mean and its variance (exact members alone where a group has any)."""
    exact = error_variance == 0
    exact_count = np.bincount(group, weights=exact.astype(float))
    safe = np.where(exact, 1.0, error_variance)
    precision = np.bincount(group, weights=np.where(exact, 0.0, 1.0 / safe))
    weighted = np.bincount(group, weights=np.where(exact, 0.0, values / safe))
    exact_sum = np.bincount(group, weights=np.where(exact, values, 0.0))
    has_exact = exact_count > 0
    mean = np.where(has_exact, exact_sum / np.where(has_exact, exact_count, 1.0),
                    weighted / np.where(has_exact, 1.0, precision))
    variance = np.where(has_exact, 0.0, 1.0 / np.where(has_exact, 1.0, precision))
    return mean, variance


def _group_labels(xy: np.ndarray, tolerance: float) -> np.ndarray:
    """A group label per sample: samples within ``tolerance`` of one another (single linkage) share one.

    Samples at exactly the same location are grouped first by sorting their coordinates (``np.unique``,
    O(n log n) whatever the number of repeats); only the distinct locations then go through the pair search
    of a k-d tree, which finds the pairs within ``tolerance``. With ``tolerance`` 0 that search is skipped.
    """
    locations, location_of = np.unique(xy, axis=0, return_inverse=True)
    location_of = location_of.ravel()
    if tolerance == 0 or len(locations) < 2:
        return location_of
    m = len(locations)
    pairs = cKDTree(locations).query_pairs(r=tolerance, output_type="ndarray")
    links = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(m, m))
    _, label = connected_components(links, directed=False)
    return label[location_of]


def check_samples(xy: np.ndarray, values: np.ndarray, minimum: int = 3) -> None:
    """Raise FieldcastError when the samples cannot be modelled.

    The checks, in order: the shapes; at least ``minimum`` samples with
    finite coordinates and value; no missing or infinite coordinates; no
    missing or infinite values; no value beyond :data:`LARGEST_VALUE` in magnitude; values not all equal.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations in CRS units.
    values : ndarray of shape (n,)
        Sample values (modelling scale).
    minimum : int
        Fewest usable samples accepted (3 by default: a covariance model
        needs at least a few pairs of points).
    """
    xy, values = _sample_arrays(xy, values)
    coordinates_ok = np.all(np.isfinite(xy), axis=1)
    values_ok = np.isfinite(values)
    usable = int(np.count_nonzero(coordinates_ok & values_ok))
    if usable < minimum:
        unusable = len(xy) - usable
        dropped = f" ({unusable} more have missing or infinite values or coordinates)" if unusable else ""
        raise FieldcastError(
            f"There are only {usable} usable samples{dropped}; at least {minimum} are needed to model "
            "spatial variation. Choose a layer or field with more samples that have a value."
        )
    if not np.all(coordinates_ok):
        bad = np.flatnonzero(~coordinates_ok)
        raise FieldcastError(
            f"{len(bad)} sample(s) have missing or infinite coordinates (first at row {bad[0]}); "
            "drop those features or repair their geometry."
        )
    if not np.all(values_ok):
        bad = np.flatnonzero(~values_ok)
        raise FieldcastError(
            f"{len(bad)} sample value(s) are missing or infinite (first at row {bad[0]}); filter those "
            "features out, or choose a field without empty values."
        )
    huge = np.flatnonzero(np.abs(values) > LARGEST_VALUE)
    if len(huge):
        raise FieldcastError(
            f"{len(huge)} sample value(s) are beyond \u00b1{LARGEST_VALUE:g} (first at row {huge[0]}: "
            f"{values[huge[0]]:g}); their squares pass the largest variance a model takes ({MAX_SILL:g}) and "
            "overflow the computations. Rescale the field to "
            "larger units (e.g. divide it by 1e6 with the Field calculator), or use TRANSFORM=log for "
            "positive values spanning many orders of magnitude."
        )
    spread = float(np.max(values) - np.min(values))
    if spread <= 1e-12 * float(np.max(np.abs(values))):
        raise FieldcastError(
            f"All {len(values)} values equal {values[0]:g}: there is nothing to interpolate (the surface "
            "would be that constant everywhere). Check that the right field was chosen."
        )
