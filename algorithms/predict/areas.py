"""Per-polygon decisions: the average of the attribute over each unit, its spread and its exceedance.

Each polygon is discretised into regular points (:mod:`..io.polygons`: about 64 points, spacing
``sqrt(area / 64)``, at most :data:`MAX_POINTS`); the polygon's average ``Z_A`` is the arithmetic mean of
the attribute at those points, in attribute units. Given the data the latent field at the points is
jointly Gaussian with the kriging mean ``mu`` and error covariance ``S``
(:meth:`.kriging.KrigingPredictor.joint_predict`), so:

- no transform: ``Z_A`` is Gaussian with mean ``mean(mu)`` and variance ``mean(S)`` over all pairs of
  points — block kriging of the polygon (Journel & Huijbregts 1978); its exceedance probability and
  percentiles are in closed form, ``1 - Phi((t - m) / s)`` and ``m + z_q s``;
- log model, ``Z = exp(Y) - offset``: the exact expectation of the arithmetic average is
  ``mean_i exp(mu_i + S_ii / 2) - offset`` and its variance
  ``mean_ij exp(mu_i + mu_j + (S_ii + S_jj) / 2) (exp(S_ij) - 1)`` (lognormal moments, Aitchison & Brown
  1957); its exceedance probability and percentiles come from ``REALIZATIONS`` draws of the points' joint
  law (the engine's simulation factor), the average of ``exp(.) - offset`` per draw.

The share of the polygon expected above the threshold is the mean of the points' exceedance
probabilities; with a depth, the volume above the threshold per draw is ``area * share_r * depth`` and
its P10/P50/P90 are over the draws. Only the latent field counts (the nugget, measurement error and
micro-scale variation, averages out over a unit; per-sample measurement-error variances only enter the
samples' diagonal). With completed data sets of samples below a limit (``value_sets``, m x n) every set is
kriged with the one factorisation; the polygon's mean is the average of the sets' means and its variance the
average within-set variance plus ``(1 + 1/m)`` times the variance of the sets' means (Rubin's rules, Rubin
1987, as :class:`..censored.imputed_kriging.ImputedKriging` does for points), and draw ``r`` is conditioned on
set ``r mod m``. With more than :data:`GLOBAL_AREA_LIMIT` samples each
polygon is kriged from the union of the :data:`AREA_NEIGHBOURS` nearest samples of each of its points.
"""
from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from scipy import stats
from scipy.spatial import cKDTree

from ..censored.imputed_kriging import combine_sets
from ..errors import Cancelled, FieldcastError
from ..io.polygons import MAX_POINTS, TARGET_POINTS, PolygonPoints, discretise_polygon
from ..model.covariance import CovarianceModel
from ..model.mean import MeanModel
from ..model.transform import Transform
from ..simulate.circulant import covariance_factor
from .choice import LogLine
from .exceedance import exceedance_probability
from .kriging import KrigingPredictor

AREA_FIELDS = ("mean", "sd", "pexc", "p10", "p50", "p90", "area", "share_above",
               "volume_p10", "volume_p50", "volume_p90")
"""What :func:`assess_areas` gives per polygon, in this order (volumes only with a depth)."""

PERCENTS = (10.0, 50.0, 90.0)
"""Percentiles of the polygon average and of the volume above the threshold."""

GLOBAL_AREA_LIMIT = 2000
"""Most samples kriged all together for every polygon; above it each polygon takes its nearest samples."""

AREA_NEIGHBOURS = 32
"""Nearest samples of each discretisation point whose union krige a polygon above :data:`GLOBAL_AREA_LIMIT`."""


@dataclass
class AreaAssessment:
    """Per-polygon results of :func:`assess_areas`.

    Attributes
    ----------
    values : dict of str to ndarray
        One array per name of :data:`AREA_FIELDS` (NaN where not computed: volumes without a depth, a
        polygon whose points have no covariate value). Units: attribute units for the average and its
        percentiles, probabilities and shares in [0, 1], area in CRS units squared, volume in CRS units
        squared times the depth's units.
    centroid_only : ndarray of bool
        Polygons too small for any discretisation point: kriged at their centroid.
    points : ndarray of int
        Discretisation points per polygon.
    spacing : ndarray
        Discretisation spacing per polygon (CRS units).
    capped : int
        Polygons whose points were thinned to :data:`MAX_POINTS`.
    realisations : int
        Draws per polygon.
    """

    values: dict[str, np.ndarray]
    centroid_only: np.ndarray
    points: np.ndarray
    spacing: np.ndarray
    capped: int
    realisations: int

    def log_lines(self, units: str) -> list[LogLine]:
        """The method in words for the run's log: discretisation, draws, flagged polygons."""
        median = int(np.median(self.points)) if len(self.points) else 0
        lines = [LogLine("info", f"Each polygon's average is taken over regular points at a spacing of sqrt(area / "
                                 f"{TARGET_POINTS}) (here {np.min(self.spacing, initial=np.inf):.3g} to "
                                 f"{np.max(self.spacing, initial=0):.3g} {units}; {median} points per polygon at the "
                                 f"median, at most {MAX_POINTS}); probabilities and percentiles of a log model and "
                                 f"the volumes come from {self.realisations:,} draws of the points' joint law given "
                                 "the data.")]
        flagged = int(np.count_nonzero(self.centroid_only))
        missing = int(np.count_nonzero(self.points == 0))
        for level, number, text in (
                ("info", self.capped, f"had more than {MAX_POINTS} points and were thinned evenly to {MAX_POINTS}."),
                ("warning", flagged, "are too small or thin for any discretisation point: they are kriged at their "
                                     "centroid (flagged in the output)."),
                ("warning", missing, "lie where a covariate raster has no value: their results are empty (NULL).")):
            if number:
                lines.append(LogLine(level, f"{number:,} polygon(s) {text}"))
        return lines


class _PolygonKriging:
    """Which predictor kriges a polygon: one global predictor, or one from the polygon's nearest samples."""

    def __init__(self, xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel,
                 covariates: np.ndarray | None, error_variance: np.ndarray | None) -> None:
        self.xy, self.values, self.covariance, self.mean = xy, values, covariance, mean
        self.covariates, self.error_variance = covariates, error_variance
        self.local = len(xy) > GLOBAL_AREA_LIMIT
        self.tree = cKDTree(xy) if self.local else None
        self.global_predictor = None if self.local else KrigingPredictor(xy, values, covariance, mean, covariates,
                                                                         error_variance)

    def predictor(self, points: np.ndarray) -> KrigingPredictor:
        if not self.local:
            return self.global_predictor
        _, nearest = self.tree.query(points, k=min(AREA_NEIGHBOURS, len(self.xy)))
        chosen = np.unique(nearest)
        return KrigingPredictor(self.xy[chosen], self.values[chosen], self.covariance, self.mean,
                                None if self.covariates is None else self.covariates[chosen],
                                None if self.error_variance is None else self.error_variance[chosen])


def thinned(points: np.ndarray) -> np.ndarray:
    """At most :data:`MAX_POINTS` of ``points``, evenly spaced in their lattice order."""
    if len(points) <= MAX_POINTS:
        return points
    return points[np.linspace(0, len(points) - 1, MAX_POINTS).round().astype(int)]


def polygon_average(mu: np.ndarray, joint: np.ndarray, transform: Transform, threshold: float,
                    draws: np.ndarray) -> tuple[float, float, float, np.ndarray]:
    """Mean, sd, exceedance probability and P10/P50/P90 of one polygon's arithmetic average (attribute units).

    ``mu`` holds the kriging means of the points (k, m), one column per completed data set (m = 1 without
    values below a limit); the set results are combined by Rubin's rules (module docstring). ``draws`` are the
    draws of the points' latent field (k, R); used for the log model's probability and percentiles, which have
    no closed form.
    """
    if transform.kind == "none":
        means = np.mean(mu, axis=0)
        within = np.array([max(float(np.mean(joint)), 0.0)])
    else:
        point_means = np.exp(mu + 0.5 * np.diag(joint)[:, None])
        means = np.mean(point_means, axis=0) - transform.offset
        pair_sums = np.einsum("im,jm,ij->m", point_means, point_means, np.expm1(joint))
        within = np.array([max(float(np.mean(pair_sums)) / len(mu) ** 2, 0.0)])
    combined, variance = combine_sets(means[None, :], within)
    mean, sd = float(combined[0]), float(np.sqrt(variance[0]))
    if transform.kind == "none":
        pexc = float(exceedance_probability(np.array([mean]), np.array([sd * sd]), threshold)[0])
        return mean, sd, pexc, mean + sd * stats.norm.ppf(np.array(PERCENTS) / 100.0)
    averages = np.mean(np.exp(draws), axis=0) - transform.offset
    return mean, sd, float(np.mean(averages > threshold)), np.percentile(averages, PERCENTS)


def assess_areas(xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel,
                 transform: Transform, polygons: Sequence[bytes], threshold: float, *, realisations: int = 1000,
                 seed: int | None = None, depths: np.ndarray | float | None = None,
                 covariates: np.ndarray | None = None,
                 covariates_at: Callable[[np.ndarray], np.ndarray] | None = None, spacing: float | None = None,
                 error_variance: np.ndarray | None = None, value_sets: np.ndarray | None = None,
                 progress: Callable[[float], None] | None = None,
                 should_stop: Callable[[], bool] | None = None) -> AreaAssessment:
    """Average, spread and exceedance of the attribute over each polygon, and the share and volume above a threshold.

    Parameters
    ----------
    xy, values : ndarray
        Samples (n, 2) in the working CRS and their values in the modelling scale (n,).
    covariance, mean, transform :
        The model.
    polygons : sequence of bytes
        Polygons (WKB) in the working CRS.
    threshold : float
        Limit in attribute units.
    realisations : int
        Draws of each polygon's points (probabilities and percentiles of a log model; volumes).
    seed : int, optional
        Seed of the draws (the same seed gives the same results).
    depths : float or ndarray of shape (len(polygons),), optional
        Depth or thickness per polygon (length units of the CRS or any unit the caller names); NaN or no
        depth leaves the volumes NaN.
    covariates : ndarray of shape (n, q), optional
        Covariate design columns at the samples.
    covariates_at : callable, optional
        Design columns at points (k, 2) -> (k, q), NaN where there is no value; needed with covariates.
    spacing : float, optional
        Fixed discretisation spacing (CRS units) instead of the adaptive one.
    error_variance : ndarray of shape (n,), optional
        Measurement-error variance of each sample (modelling units squared), added to the samples' diagonal
        beside the nugget.
    value_sets : ndarray of shape (m, n), optional
        Completed data sets of samples below a limit (modelling scale), kriged instead of ``values``; the
        results combine them by Rubin's rules and draw ``r`` is conditioned on set ``r mod m``.
    progress, should_stop : callable, optional
        Progress per polygon; ``should_stop()`` true raises :class:`Cancelled`.

    Returns
    -------
    AreaAssessment
    """
    if int(realisations) < 10:
        raise FieldcastError(f"REALIZATIONS is {realisations}; give at least 10 (1,000 or more is common practice "
                             "for stable probabilities and percentiles).")
    if not np.isfinite(threshold):
        raise FieldcastError(f"THRESHOLD must be a finite number in the attribute's units; got {threshold!r}.")
    if mean.covariate_names and covariates_at is None:
        raise FieldcastError("The model has covariates: give their rasters (COVARIATES) for the areas.")
    count = len(polygons)
    depth = np.broadcast_to(np.asarray(np.nan if depths is None else depths, dtype=float), (count,))
    results = {name: np.full(count, np.nan) for name in AREA_FIELDS}
    centroid_only, points_used, capped = np.zeros(count, dtype=bool), np.zeros(count, dtype=int), 0
    spacings = np.zeros(count)
    columns_kriged = values if value_sets is None else np.atleast_2d(np.asarray(value_sets, dtype=float)).T
    kriging = _PolygonKriging(xy, columns_kriged, covariance, mean, covariates, error_variance)
    rng = np.random.default_rng(seed)
    level = float(transform.forward(np.array([threshold]))[0]) if threshold + transform.offset > 0 else -np.inf
    for index, wkb in enumerate(polygons):
        if should_stop is not None and should_stop():
            raise Cancelled("The area assessment was cancelled.")
        unit: PolygonPoints = discretise_polygon(wkb, spacing, what=f"Polygon {index + 1} of AREAS")
        points = thinned(unit.points)
        capped += int(len(points) < len(unit.points))
        centroid_only[index], spacings[index] = unit.centroid_only, unit.spacing
        results["area"][index] = unit.area
        columns = None
        if covariates_at is not None:
            columns = covariates_at(points)
            usable = np.all(np.isfinite(columns), axis=1)
            points, columns = points[usable], columns[usable]
        points_used[index] = len(points)
        if not len(points):
            continue
        mu, joint = kriging.predictor(points).joint_predict(points, columns)
        mu = mu.reshape(len(points), -1)
        conditioning = mu[:, np.arange(int(realisations)) % mu.shape[1]]
        draws = conditioning + covariance_factor(joint) @ rng.standard_normal((len(points), int(realisations)))
        average = polygon_average(mu, joint, transform, threshold, draws)
        for name, value in zip(("mean", "sd", "pexc"), average[:3]):
            results[name][index] = value
        for percent, value in zip(PERCENTS, average[3]):
            results[f"p{percent:.0f}"][index] = value
        point_mean, point_variance = combine_sets(mu, np.diag(joint))
        results["share_above"][index] = float(np.mean(exceedance_probability(point_mean, point_variance, threshold,
                                                                             transform=transform)))
        if np.isfinite(depth[index]):
            volumes = unit.area * np.mean(draws > level, axis=0) * depth[index]
            for percent, value in zip(PERCENTS, np.percentile(volumes, PERCENTS)):
                results[f"volume_p{percent:.0f}"][index] = value
        if progress is not None:
            progress((index + 1) / max(count, 1))
    return AreaAssessment(results, centroid_only, points_used, spacings, capped, int(realisations))
