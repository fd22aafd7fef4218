"""Local (moving-neighbourhood) kriging: each target is predicted from its nearest samples only.

Neighbour search. The samples and targets are mapped into the anisotropy
frame of the first covariance structure, ``(major, minor / ratio)`` with the
axes of :meth:`.covariance.Structure.axis_offsets`, so that the Euclidean
distance there is the structure's range times its scaled distance ``r``: the
search circle of that frame is an ellipse that follows the model (major
semi-axis ``search_radius``, minor semi-axis ``ratio * search_radius``, CRS
units). A :class:`scipy.spatial.cKDTree` returns the ``neighbours`` nearest
samples within the radius (all samples when there are fewer).

Sectors. With ``sectors = s > 1`` the neighbours are spread around the
target: of its ``SECTOR_POOL * k`` nearest candidates (:data:`SECTOR_POOL`), the
``k // s`` nearest in each of ``s`` equal angular sectors of the search frame
are taken first and the remaining slots filled by the nearest others (a
sector search; common practice). Inside a gap (clouds, an unsampled block)
the plain nearest samples all sit on its nearest edge; spread over sectors
they come from every side, which is what global kriging would weigh.

Kriging system. With the ``k`` neighbours, their covariance ``K`` (nugget on
the diagonal), their design ``F`` (``k x p``, see :mod:`..model.mean`), the latent
covariance ``c0`` between the target and the neighbours and the target's
design row ``f0``, the kriging weights ``lambda`` and Lagrange multipliers
``nu`` solve the system (Cressie 1993, *Statistics for Spatial Data*, rev.
ed., section 3.4 on universal kriging; ordinary kriging is ``p = 1``)::

    [ K    F ] [lambda]   [c0]
    [ F^T  0 ] [  nu  ] = [f0]

    mean(x0)     = lambda^T y                (plus the known mean for p = 0)
    variance(x0) = C(0) - lambda^T c0 - nu^T f0

``C(0)`` is the latent-field variance (sill without nugget); with a known
mean (simple kriging) ``p = 0`` and ``y`` is the data minus that mean. The
system is solved by block elimination: ``K = L L^T`` (Cholesky), then the
Schur complement ``A = F^T K^-1 F = R R^T``, which gives the same numbers as
the GLS form of :mod:`.kriging`::

    beta = A^-1 F^T K^-1 y
    mean(x0)     = f0^T beta + (L^-1 c0)^T L^-1 (y - F beta)
    variance(x0) = C(0) - |L^-1 c0|^2 + |R^-1 (f0 - F^T K^-1 c0)|^2

The trend terms are evaluated in the search frame, centred on the
neighbours and scaled by their spread: a linear change of coordinates, so
it spans the same polynomials as the global frame (the result is unchanged)
but keeps ``A`` well conditioned; covariances are divided by the sill for
the same reason. When every structure shares the first one's azimuth and
ratio (as fitted models do), covariances are computed directly from
distances in the search frame.

Global trend. With ``trend=`` (a :class:`.global_trend.GlobalTrend`, the GLS
coefficients ``beta`` and their covariance ``V_beta`` from all samples) and a
mean with estimated terms, the neighbourhoods do not re-estimate the trend:
they krig the residuals ``r = y - F beta`` by simple kriging (``p = 0``
locally) and the trend's estimation error enters the variance as in
universal kriging with the global coefficients (Cressie 1993, section 3.4)::

    mean(x0)     = f0^T beta + (L^-1 c0)^T L^-1 r_N
    variance(x0) = C(0) - |L^-1 c0|^2 + g^T V_beta g,   g = f0 - F_N^T K^-1 c0

with ``f0`` and ``F_N`` in the mean model's own frame. With every sample as
the neighbourhood this is global universal kriging exactly. Without
``trend=`` (the locally varying mean) each neighbourhood estimates its own
trend: where the neighbours sit on one side of the target (gaps, edges) that
trend is extrapolated and its variance is too small.

Shared neighbourhoods. Nearby targets mostly have the same nearest
samples, and a sample set factorised once serves every target that uses it
(Batches, below). So targets are grouped into square tiles of side
``tile_spacings`` times the mean sample spacing (``sqrt(hull area / n)`` in
the search frame; :data:`TILE_SPACINGS`) on a grid anchored at the frame's
origin, the neighbours are searched once from each tile's centre (with the
same rule, sectors included), and a target takes its tile's set when that set
contains the target's own :attr:`LocalKrigingPredictor.guarded_nearest`
nearest samples (:data:`GUARDED_NEAREST`, at most ``k // sectors``);
otherwise (a tile across the edge of a gap or of the samples) it searches
its own. Under the screening effect the nearest samples carry most of the
weight (Stein 2002, *Ann. Statist.* 30(1), 298-323), so the guard keeps the
predictions close to those from each target's own set. Mean and variance
come from the same formulas as for a target's own set, applied to the set
used, so the variance describes the weights actually applied; it can exceed
that of the target's own set slightly. The
choice depends only on the target and its tile, not on how targets are
chunked or tiled for output. It is off (every target its own search) with a
search radius, when ``k`` covers all samples, or with ``tile_spacings=None``.

Batches. Targets are taken ``chunk_size`` at a time and grouped by
neighbour set (as a set of samples): each distinct set is factorised once
(``L``, ``R``, ``beta``, ``L^-1 (y - F beta)``; stacks of Cholesky factors
and triangular solves from :mod:`..linalg.batched`), and every target then needs one
triangular solve with its set's factor. Sets are factorised in stacks of up
to :data:`STACK_SIZE`, and each stack's targets are solved right after it, in
the same worker thread (the factors are still in cache); there is no Python
loop per target.

Several fields. ``y`` may be an (n, m) matrix of fields observed at the
same samples that share the covariance and mean model: each neighbour set
whitens all columns at once (``beta`` is (p, m) per set) and a target's
``m`` means come from the same ``L^-1 c0`` and trend row; the variance is
shared (the weights do not depend on ``y``; Cressie 1993, section 3.4).
Internally ``y`` is always (n, m), with ``m = 1`` for one field.

Nodata. A target with fewer than ``n_terms + 1`` neighbours within the
search radius (at least one more sample than trend terms; common practice),
or whose local system is singular (``K`` or ``A`` not numerically positive
definite, e.g. collinear neighbours under a linear trend, or ``K`` beyond the
refuse level of :mod:`..linalg.condition_policy`), gets NaN for mean (every
field) and variance; :attr:`LocalKrigingPredictor.last_unresolved` counts them.
The condition of ``K`` is judged from the certified floor of that module
where it suffices (any nugget or error variance), else estimated.
Targets whose ``K`` is refused, or used but past the warning level of the
same rule, are also counted over the predictor's life
(:attr:`LocalKrigingPredictor.singular_targets`,
:attr:`LocalKrigingPredictor.ill_conditioned_targets`) so that the caller can
report them with the advice of that module; the run never stops for them.

Weights. :meth:`LocalKrigingPredictor.weights` returns the kriging weights
``lambda`` of the same systems in sparse form, each target's neighbour
indices and weights (conditional simulation gathers the residuals with
them); unresolved targets are marked with NaN weights.

Leave-one-out. :meth:`LocalKrigingPredictor.leave_one_out` predicts each
sample from its ``k`` nearest other samples: the ``k + 1`` nearest are found
in the search frame, the sample itself (at distance 0) is dropped, and the
same batched systems give the prediction and latent variance, to which the
nugget is added (the error in predicting the observation).
"""
from __future__ import annotations

import math
import numbers
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor

import numpy as np
from scipy.spatial import ConvexHull, QhullError, cKDTree

from ..errors import Cancelled, FieldcastError, FieldcastUsageError
from ..io.samples import check_error_variance
from ..linalg.batched import WORKERS, back_substitution, cholesky_stack, forward_substitution
from ..linalg.condition_policy import (
    WARN_RECIPROCAL,
    certified_reciprocal_condition,
    stack_reciprocal_condition,
    usable,
)
from ..model.correlation import correlation
from ..model.covariance import CovarianceModel, search_frame
from ..model.mean import MeanModel
from .global_trend import GlobalTrend
from .kriging import (
    MORE_SAMPLES_ADVICE,
    as_points,
    as_value_columns,
    check_distinct,
    checked_variance,
    target_covariates,
)

STACK_SIZE = 2048
"""Largest number of neighbour sets factorised, or targets solved, at once (bounds temporary memory)."""

SECTOR_POOL = 8
"""Candidates per neighbour slot searched for a sector search (``SECTOR_POOL * k`` nearest samples)."""

SECTOR_FIRST_POOL = 3
"""Candidates per neighbour slot tried first in a sector search (the full pool only where they do not settle it)."""

TILE_SPACINGS = 1.0
"""Side of the tiles whose targets share a neighbour search, in mean sample spacings (module docstring): on 10^5
samples and 10^6 targets it cut the local kriging time by a third against every target's own search, while on the
Meuse samples the mean departure from global kriging grew by 4 % of its size (DEVELOPERS.md)."""

GUARDED_NEAREST = 4
"""Nearest samples of its own that a target's shared set must contain (else it searches its own; at most
``k // sectors``)."""

LEAVE_ONE_OUT_CHUNK = 8192
"""Samples predicted at once by :meth:`LocalKrigingPredictor.leave_one_out` (between progress reports)."""


class LocalKrigingPredictor:
    """Kriging from the nearest samples of each target (moving neighbourhood).

    ``xy``, ``values``, ``mean`` and ``covariates`` are as for
    :class:`.kriging.KrigingPredictor` (simple, ordinary or universal kriging
    by the kind of mean; ``values`` (n,) for one field or (n, m) for m fields
    at the same points, with one known mean for all); the first structure of
    ``covariance`` also shapes the search ellipse.

    Parameters
    ----------
    neighbours : int
        Largest number of samples per target (at least ``mean.n_terms + 1``).
    search_radius : float, optional
        Major semi-axis of the search ellipse (CRS units); None searches all samples.
    error_variance : ndarray of shape (n,), optional
        Measurement-error variance of each sample (u2), added to the diagonal of each local ``K`` beside the
        nugget (as for :class:`.kriging.KrigingPredictor`).
    trend : GlobalTrend, optional
        The trend estimated once from all samples (:func:`.global_trend.estimate_trend`): the
        neighbourhoods krig its residuals and its coefficient covariance enters the variance (module
        docstring). None re-estimates the mean in each neighbourhood. Ignored for a known mean.
    sectors : int
        Equal angular sectors the neighbours are spread over (module docstring); 1 takes the nearest.
    tile_spacings : float, optional
        Side of the tiles whose targets share a neighbour search, in mean sample spacings (module docstring,
        "Shared neighbourhoods"); None gives every target its own search.

    After construction ``n`` is the number of samples, ``neighbours`` the
    number used per target (``min(neighbours, n)``) and
    ``minimum_neighbours`` the fewest a target needs (``mean.n_terms + 1``);
    after each :meth:`predict`, ``last_unresolved`` counts its targets left
    as NaN (too few neighbours in range, or a singular local system).
    ``singular_targets`` and ``ill_conditioned_targets`` count, over all calls
    since construction, the targets whose neighbour covariance matrix was
    refused (left NaN) or used with a warning by :mod:`..linalg.condition_policy`.
    ``tile_side`` is the side of the shared-neighbourhood tiles in the search frame (CRS units; None when every
    target searches its own) and ``guarded_nearest`` the own nearest samples a shared set must contain.
    """

    def __init__(self, xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel, *,
                 neighbours: int = 32, search_radius: float | None = None,
                 covariates: np.ndarray | None = None, error_variance: np.ndarray | None = None,
                 trend: GlobalTrend | None = None, sectors: int = 1,
                 tile_spacings: float | None = TILE_SPACINGS) -> None:
        points = as_points(xy, "Sample coordinates")
        observed = as_value_columns(values, len(points))
        self.n = len(points)
        self.trend = trend if mean.n_terms else None
        self.minimum_neighbours = 1 if self.trend is not None else mean.n_terms + 1
        if int(neighbours) != neighbours or neighbours < self.minimum_neighbours:
            raise FieldcastError(
                f"The number of neighbours must be a whole number of at least {self.minimum_neighbours} "
                f"(one more than the {mean.n_terms} trend term(s) of the {mean.kind} mean); got {neighbours!r}."
            )
        if self.n < self.minimum_neighbours:
            raise FieldcastError(
                f"The {mean.kind} mean model needs at least {self.minimum_neighbours} samples; there are {self.n}. "
                + MORE_SAMPLES_ADVICE
            )
        if search_radius is not None and not (math.isfinite(search_radius) and search_radius > 0):
            raise FieldcastError(
                f"The search radius must be a positive distance in CRS units (or empty for no limit); "
                f"got {search_radius!r}."
            )
        if int(sectors) != sectors or sectors < 1:
            raise FieldcastUsageError(f"sectors must be a whole number of at least 1; got {sectors!r}.")
        if error_variance is not None:
            error_variance = check_error_variance(error_variance, self.n)
        if covariance.nugget == 0 and (error_variance is None or not error_variance.min() > 0):
            check_distinct(points)
        self.error_variance = error_variance
        self.covariance = covariance
        self.mean = mean
        self.sectors = int(sectors)
        self.neighbours = min(int(neighbours), self.n)
        self.search_radius = search_radius
        self.last_unresolved = 0
        self._tallies: list[tuple[int, int]] = []  # (singular, ill-conditioned) targets per solved stack
        self._covariates = None if covariates is None else np.array(covariates, dtype=float).reshape(self.n, -1)
        mean.design(points[:1], None if self._covariates is None else self._covariates[:1])  # checks the columns
        self._single_field = observed.ndim == 1
        self._residual = (observed - mean.known_mean(1)[0]).reshape(self.n, -1)  # (n, fields)
        self._local_mean = MeanModel(mean.kind, mean.known_value, (0.0, 0.0), 1.0, mean.covariate_names)
        self._global_design = np.zeros((self.n, 0))  # F in the mean's own frame, with a global trend only
        if self.trend is not None:
            self._global_design = mean.design(points, self._covariates)
            self._residual = self._residual - self._global_design @ self.trend.coefficients.reshape(mean.n_terms, -1)
            self._local_mean = MeanModel("known")
        first = covariance.structures[0]
        self._isotropic_in_frame = all(s.azimuth == first.azimuth and s.ratio == first.ratio
                                       for s in covariance.structures)
        self._frame_xy = search_frame(first, points)
        self._tree = cKDTree(self._frame_xy)
        self.tile_side = self._shared_tile_side(tile_spacings)
        self.guarded_nearest = max(1, min(GUARDED_NEAREST, self.neighbours // self.sectors))

    def sharing_words(self, per: str) -> str:
        """The shared neighbourhoods in words for a log ("" when every target searches its own); ``per`` names a
        target ("cell", "target point")."""
        if self.tile_side is None:
            return ""
        return (f"nearby {per}s share one neighbour search where it holds each {per}'s own {self.guarded_nearest} "
                "nearest")

    def _shared_tile_side(self, tile_spacings: float | None) -> float | None:
        """Side of the shared-neighbourhood tiles (search frame), or None when targets search their own."""
        if tile_spacings is not None and not (isinstance(tile_spacings, numbers.Real)
                                              and math.isfinite(tile_spacings) and tile_spacings > 0):
            raise FieldcastUsageError(f"tile_spacings must be a positive number of sample spacings, or None; "
                                      f"got {tile_spacings!r}.")
        if tile_spacings is None or self.search_radius is not None or self.neighbours >= self.n:
            return None
        try:
            area = ConvexHull(self._frame_xy).volume  # the area of a planar hull
        except QhullError:  # collinear or too few distinct samples: no area to share
            return None
        return float(tile_spacings) * math.sqrt(area / self.n)

    def _covariance(self, dx: np.ndarray, dy: np.ndarray) -> np.ndarray:
        """Latent covariance for offsets in the search frame (see :func:`..model.covariance.search_frame`)."""
        if self._isotropic_in_frame:
            distance = dx * dx
            distance += dy * dy
            return self._covariance_at(np.sqrt(distance, out=distance))
        first = self.covariance.structures[0]
        theta = math.radians(first.azimuth)
        minor = dy * first.ratio  # back to CRS offsets: the frame's rotation is orthogonal
        return self.covariance.covariance_from_offsets(dx * math.sin(theta) + minor * math.cos(theta),
                                                       dx * math.cos(theta) - minor * math.sin(theta))

    def _covariance_at(self, distance: np.ndarray) -> np.ndarray:
        """Latent covariance at search-frame distances (all structures share the frame)."""
        first, *others = self.covariance.structures
        total = correlation(first.family, distance / first.range, first.smoothness)
        total *= first.partial_sill
        for s in others:
            total += s.partial_sill * correlation(s.family, distance / s.range, s.smoothness)
        return total

    def _set_covariances(self, points: np.ndarray) -> np.ndarray:
        """Latent covariance matrices (u, k, k) of point sets (u, k, 2) in the search frame."""
        return self._covariance(points[:, :, None, 0] - points[:, None, :, 0],
                                points[:, :, None, 1] - points[:, None, :, 1])

    def _design(self, offsets: np.ndarray, covariates: np.ndarray | None) -> np.ndarray:
        """Trend rows at scaled offsets of any leading shape ``(..., 2)``: shape ``(..., p)``."""
        flat = offsets.reshape(-1, 2)
        flat_covariates = None if covariates is None else covariates.reshape(len(flat), -1)
        return self._local_mean.design(flat, flat_covariates).reshape(offsets.shape[:-1] + (-1,))

    def _factorise(self, sets: np.ndarray) -> dict[str, np.ndarray]:
        """Block elimination of the kriging systems of neighbour sets (u, k); see the module docstring."""
        points = self._frame_xy[sets]
        centre = points.mean(axis=1)
        spread = np.abs(points - centre[:, None, :]).max(axis=(1, 2))
        scale = np.where(spread > 0, spread, 1.0)
        k = sets.shape[1]
        sill = self.covariance.sill
        matrices = self._set_covariances(points) / sill
        errors = np.zeros((len(sets), k)) if self.error_variance is None else self.error_variance[sets] / sill
        matrices[:, np.arange(k), np.arange(k)] = 1.0 + errors  # (field variance + nugget + error variance) / sill
        factors, positive = cholesky_stack(matrices)  # K / sill = L L^T
        estimate = certified_reciprocal_condition(k, self.covariance.nugget / sill + errors.min(axis=1),
                                                  1.0 + errors.max(axis=1))
        estimated = estimate < WARN_RECIPROCAL  # the floor does not settle it: estimate from the factor
        if estimated.any():
            estimate[estimated] = stack_reciprocal_condition(matrices[estimated], factors[estimated],
                                                             positive[estimated])
        solvable = positive & usable(estimate, k)
        factors[~solvable] = np.eye(k)  # refused systems: keep the solves finite, their targets become NaN
        covariates = None if self._covariates is None else self._covariates[sets]
        design = self._design((points - centre[:, None, :]) / scale[:, None, None], covariates)
        fields, local_terms = self._residual.shape[1], design.shape[2]
        white = forward_substitution(factors, np.concatenate([self._residual[sets], design,
                                                              self._global_design[sets]], axis=2))
        white_values = white[:, :, :fields]
        white_design, white_global = white[:, :, fields:fields + local_terms], white[:, :, fields + local_terms:]
        trend_factors, trend_solvable = cholesky_stack(np.swapaxes(white_design, 1, 2) @ white_design)
        projected = np.einsum("uji,ujf->uif", white_design, white_values)
        coefficients = back_substitution(trend_factors, forward_substitution(trend_factors, projected))  # (u, p, m)
        white_residual = white_values - np.einsum("uij,ujf->uif", white_design, coefficients)  # L^-1 (y - F beta)
        return {"factors": factors, "white_design": white_design, "white_global": white_global,
                "trend_factors": trend_factors,
                "coefficients": coefficients, "white_residual": white_residual,
                "solvable": solvable & trend_solvable, "ill_conditioned": solvable & (estimate < WARN_RECIPROCAL),
                "centre": centre, "scale": scale}

    @property
    def singular_targets(self) -> int:
        """Targets left NaN since construction because their local system was singular or refused."""
        return sum(singular for singular, _ in self._tallies)

    @property
    def ill_conditioned_targets(self) -> int:
        """Targets solved since construction from a local covariance matrix past the warning level."""
        return sum(ill for _, ill in self._tallies)

    def _unsolvable(self, system: dict[str, np.ndarray], chosen: np.ndarray) -> np.ndarray:
        """Which targets (their sets ``chosen``) have an unsolvable system; tallies them and the ill-conditioned."""
        unsolvable = ~system["solvable"][chosen]
        self._tallies.append((int(np.count_nonzero(unsolvable)),
                              int(np.count_nonzero(system["ill_conditioned"][chosen]))))  # append is thread-safe
        return unsolvable

    def _in_stacks(self, neighbour_index: np.ndarray, pool: ThreadPoolExecutor,
                   solve: Callable[[np.ndarray, np.ndarray, np.ndarray, dict[str, np.ndarray]], None]) -> np.ndarray:
        """Factorise the distinct neighbour sets of targets with neighbours (b, k), a stack at a time in ``pool``.

        For each stack of up to :data:`STACK_SIZE` distinct sets (sorted sample indices), in the same
        worker as its factorisation, ``solve(rows, sets, chosen, system)`` gets the targets ``rows`` whose
        sets are in the stack, the stack's ``sets`` (s, k), each row's set ``chosen`` (an index into
        ``sets``) and the stack's factorisation (:meth:`_factorise`). Returns the sorted set of each target.
        """
        ordered = np.sort(neighbour_index, axis=1)
        sets, set_of_target = distinct_rows(ordered)
        order = np.argsort(set_of_target, kind="stable")
        starts = np.arange(0, len(sets), STACK_SIZE)
        edges = np.searchsorted(set_of_target[order], np.append(starts, len(sets)))

        def work(stack: int) -> None:
            first = starts[stack]
            rows = order[edges[stack]:edges[stack + 1]]
            stack_sets = sets[first:first + STACK_SIZE]
            solve(rows, stack_sets, set_of_target[rows] - first, self._factorise(stack_sets))

        list(pool.map(work, range(len(starts))))
        return ordered

    def _target_terms(self, targets: np.ndarray, covariates0: np.ndarray | None, sets: np.ndarray,
                      chosen: np.ndarray, system: dict[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
        """``L^-1 c0 / sill`` (b, k) and the scaled trend row ``f0`` (b, p) of targets whose sets are ``chosen``."""
        points = self._frame_xy[sets[chosen]]
        cross = self._covariance(targets[:, None, 0] - points[:, :, 0],
                                 targets[:, None, 1] - points[:, :, 1]) / self.covariance.sill
        white_cross = forward_substitution(system["factors"][chosen], cross[:, :, None])[:, :, 0]
        return white_cross, self._design((targets - system["centre"][chosen]) / system["scale"][chosen, None],
                                         covariates0)

    def _predict_group(self, targets: np.ndarray, covariates0: np.ndarray | None, neighbour_index: np.ndarray,
                       pool: ThreadPoolExecutor) -> tuple[np.ndarray, np.ndarray]:
        """Means (b, fields) and variance (b,) of targets (b, 2, search frame) that all have ``k`` neighbours (b, k)."""
        mean = np.empty((len(targets), self._residual.shape[1]))
        variance = np.empty(len(targets))

        def solve(rows: np.ndarray, sets: np.ndarray, chosen: np.ndarray, system: dict[str, np.ndarray]) -> None:
            white_cross, gap = self._target_terms(targets[rows], None if covariates0 is None else covariates0[rows],
                                                  sets, chosen, system)
            found_mean = (np.einsum("bif,bi->bf", system["white_residual"][chosen], white_cross)
                          + np.einsum("bif,bi->bf", system["coefficients"][chosen], gap)
                          + self.mean.known_mean(1)[0])
            gap -= np.einsum("bji,bj->bi", system["white_design"][chosen], white_cross)
            white_gap = forward_substitution(system["trend_factors"][chosen], gap[:, :, None])[:, :, 0]
            found_variance = self.covariance.field_variance + self.covariance.sill * (
                np.einsum("bi,bi->b", white_gap, white_gap) - np.einsum("bi,bi->b", white_cross, white_cross))
            if self.trend is not None:  # covariates0 holds the targets' design rows f0 (see _predict_chunk)
                rows0 = covariates0[rows]
                found_mean += rows0 @ self.trend.coefficients.reshape(self.mean.n_terms, -1)
                global_gap = rows0 - np.einsum("bjp,bj->bp", system["white_global"][chosen], white_cross)
                found_variance += np.einsum("bp,pq,bq->b", global_gap, self.trend.coefficient_covariance, global_gap)
            unsolvable = self._unsolvable(system, chosen)
            found_mean[unsolvable] = np.nan
            found_variance[unsolvable] = np.nan
            mean[rows], variance[rows] = found_mean, found_variance

        self._in_stacks(neighbour_index, pool, solve)
        return mean, variance

    def _predict_chunk(self, targets: np.ndarray, covariates0: np.ndarray | None, pool: ThreadPoolExecutor
                       ) -> tuple[np.ndarray, np.ndarray]:
        """Means (b, fields) and variance (b,) (NaN where unresolved) for one chunk of targets.

        With a global trend the targets' design rows ``f0`` take the place of their covariates from here on.
        """
        if self.trend is not None:
            covariates0 = self.mean.design(targets, covariates0)
        targets = search_frame(self.covariance.structures[0], targets)
        return self._predict_found(targets, covariates0, self._neighbour_sets(targets), pool)

    def _neighbour_sets(self, targets: np.ndarray) -> np.ndarray:
        """Neighbours (b, k) of targets (b, 2, search frame): their tile's set where it guards them, else their own.

        See "Shared neighbourhoods" in the module docstring; missing neighbours are marked with index ``n``.
        """
        if self.tile_side is None:
            return self._nearest(targets, self.neighbours)
        tiles, tile_of_target = np.unique(np.floor(targets / self.tile_side), axis=0, return_inverse=True)
        found = self._nearest((tiles + 0.5) * self.tile_side, self.neighbours)[tile_of_target.reshape(-1)]
        own = self._query(targets, self.guarded_nearest)
        guarded = (own[:, :, None] == found[:, None, :]).any(axis=2).all(axis=1)
        if not guarded.all():
            unguarded = np.flatnonzero(~guarded)
            found[unguarded] = self._nearest(targets[unguarded], self.neighbours)
        return found

    def _nearest(self, targets: np.ndarray, k: int) -> np.ndarray:
        """Indices (b, k) of the ``k`` nearest samples within the search radius of targets (b, 2, search frame).

        Missing neighbours (fewer samples in range) are marked with index ``n`` and come last in each row.
        A sector search first spreads the ``SECTOR_FIRST_POOL * k`` nearest candidates and searches the full pool
        only for the targets where that shorter list could choose otherwise (:meth:`_spread`).
        """
        pool = k if self.sectors == 1 else min(self.n, SECTOR_POOL * k)
        if pool == k:
            return self._query(targets, k)
        short = min(pool, SECTOR_FIRST_POOL * k)
        found, settled = self._spread(targets, self._query(targets, short), k)
        if short < pool and not settled.all():
            again = np.flatnonzero(~settled)
            found[again] = self._spread(targets[again], self._query(targets[again], pool), k)[0]
        return found

    def _query(self, targets: np.ndarray, k: int) -> np.ndarray:
        """Indices (b, k) of the ``k`` nearest samples within the search radius, nearest first (missing = ``n``)."""
        radius = np.inf if self.search_radius is None else self.search_radius
        _, found = self._tree.query(targets, k=k, distance_upper_bound=radius, workers=WORKERS)
        return found.reshape(len(targets), k)

    def _spread(self, targets: np.ndarray, found: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
        """``k`` of the candidates ``found`` (b, pool; nearest first, missing = ``n``): ``k // sectors`` per sector
        first, then the nearest others; missing ones last.

        Also says for each target whether the choice is settled: a longer candidate list that starts with
        ``found`` chooses the same when ``found`` ends in range (no more samples) or already fills every sector's
        ``k // sectors`` slots, since candidates further out only ever take the slots left after those.
        """
        candidates = self._frame_xy[np.minimum(found, self.n - 1)]
        angle = np.arctan2(candidates[:, :, 1] - targets[:, None, 1], candidates[:, :, 0] - targets[:, None, 0])
        sector = np.minimum(((angle + np.pi) * (self.sectors / (2 * np.pi))).astype(np.intp), self.sectors - 1)
        inside = sector[:, None, :] == np.arange(self.sectors)[:, None]  # (b, sectors, pool)
        before = np.cumsum(inside, axis=2, dtype=np.int16)  # candidates so far in each sector, this one included
        rank = np.take_along_axis(before, sector[:, None, :], axis=1)[:, 0, :] - 1  # among nearer ones of its sector
        quota = k // self.sectors
        missing = found == self.n
        tier = np.where(missing, 2, np.where(rank < quota, 0, 1)).astype(np.int8)
        order = np.argsort(tier, axis=1, kind="stable")[:, :k]
        settled = missing[:, -1] | (before[:, :, -1].min(axis=1) >= quota)
        return np.take_along_axis(found, order, axis=1), settled

    def _groups_by_count(self, found: np.ndarray) -> list[tuple[int, np.ndarray]]:
        """``(k, rows)`` for each neighbour count ``k`` of at least :attr:`minimum_neighbours` in ``found`` (b, k)."""
        count = np.count_nonzero(found < self.n, axis=1)  # the tree marks missing neighbours with index n
        return [(int(k), np.flatnonzero(count == k)) for k in np.unique(count[count >= self.minimum_neighbours])]

    def _predict_found(self, targets: np.ndarray, covariates0: np.ndarray | None, found: np.ndarray,
                       pool: ThreadPoolExecutor) -> tuple[np.ndarray, np.ndarray]:
        """Means (b, fields) and latent variance (b,), NaN where unresolved, of targets (b, 2) from neighbours (b, k).

        Targets are in the search frame.
        """
        mean = np.full((len(targets), self._residual.shape[1]), np.nan)
        variance = np.full(len(targets), np.nan)
        for k, rows in self._groups_by_count(found):
            mean[rows], variance[rows] = self._predict_group(
                targets[rows], None if covariates0 is None else covariates0[rows], found[rows, :k], pool)
        return mean, checked_variance(variance, self.covariance.sill, unresolved_allowed=True,
                                      system="some neighbourhood system")

    def predict(self, xy0: np.ndarray, covariates0: np.ndarray | None = None, *, include_nugget: bool = False,
                chunk_size: int = 8192, progress: Callable[[float], None] | None = None,
                should_stop: Callable[[], bool] | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Local kriging mean and error variance at target locations.

        Same arguments and results as :meth:`.kriging.KrigingPredictor.predict`
        (targets ``xy0`` (M, 2), ``covariates0`` (M, q), ``include_nugget``,
        ``progress``, ``should_stop``), except:

        chunk_size : int
            Targets per chunk; targets of one chunk that share a neighbour set
            share its factorisation. Memory is about ``3 * chunk_size * k**2 * 8`` bytes.

        Returns
        -------
        mean : ndarray of shape (M,), or (M, m) for m fields
            Prediction (u), one column per field.
        variance : ndarray of shape (M,)
            Error variance (u2), shared by the fields. Both are NaN (in every
            column) for targets with too few neighbours within the search radius
            (or a singular local system), counted in :attr:`last_unresolved`.
        """
        targets = as_points(xy0, "Prediction locations")
        size = int(chunk_size)
        if size < 1:
            raise FieldcastError(f"chunk_size must be a positive number of locations; got {chunk_size!r}.")
        covariates0 = target_covariates(covariates0, len(targets))
        prediction, variance = self._in_chunks(
            len(targets), size, lambda chunk, pool: self._predict_chunk(
                targets[chunk], None if covariates0 is None else covariates0[chunk], pool), progress, should_stop)
        if include_nugget:
            variance += self.covariance.nugget
        return prediction, variance

    def weights(self, xy0: np.ndarray, covariates0: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Sparse kriging weights: each target's neighbours and their weights in :meth:`predict`.

        ``lambda = K^-1 c0 + K^-1 F A^-1 (f0 - F^T K^-1 c0)`` over the target's
        neighbours (module docstring), so that
        ``mean(x0) = sum_j weights[j] * (y[indices[j]] - m) + m`` with ``m``
        the known mean of simple kriging (0 otherwise; then the weights of a
        target sum to one under ordinary kriging; with a global trend the weights act on the residuals
        ``y - F beta`` and the target's trend ``f0^T beta`` is added instead of ``m``). All targets are solved at
        once: pass a few thousand at a time.

        Parameters
        ----------
        xy0 : ndarray of shape (m, 2)
            Target locations (CRS units).
        covariates0 : ndarray of shape (m, q), optional
            External-drift values at the targets.

        Returns
        -------
        indices : ndarray of int, shape (m, k)
            Sample indices of each target's neighbours, ``k = neighbours``.
            A target with fewer neighbours in range fills its last slots with
            index 0 and weight 0.
        weights : ndarray of shape (m, k)
            Kriging weights (unitless). Unresolved targets (too few neighbours
            within the search radius, or a singular local system) are marked
            with NaN in every slot, so any sum over them is NaN; they are
            counted in :attr:`last_unresolved`.
        """
        targets = search_frame(self.covariance.structures[0], as_points(xy0, "Prediction locations"))
        covariates0 = target_covariates(covariates0, len(targets))
        found = self._neighbour_sets(targets)
        indices = np.zeros(found.shape, dtype=np.intp)
        weights = np.full(found.shape, np.nan)
        with ThreadPoolExecutor(max_workers=WORKERS) as pool:
            for k, rows in self._groups_by_count(found):
                indices[rows, :k], weights[rows, :k] = self._weights_group(
                    targets[rows], None if covariates0 is None else covariates0[rows], found[rows, :k], pool)
                weights[rows, k:] = np.where(np.isnan(weights[rows, :1]), np.nan, 0.0)  # singular: NaN throughout
        self.last_unresolved = int(np.count_nonzero(np.isnan(weights[:, 0])))
        return indices, weights

    def _weights_group(self, targets: np.ndarray, covariates0: np.ndarray | None, neighbour_index: np.ndarray,
                       pool: ThreadPoolExecutor) -> tuple[np.ndarray, np.ndarray]:
        """Neighbours (b, k) and weights (b, k; NaN if singular) of targets (b, 2, search frame) with ``k`` each.

        In whitened terms ``lambda = L^-T (L^-1 c0 + L^-1 F A^-1 (f0 - F^T K^-1 c0))``
        (covariances divided by the sill throughout, which leaves ``lambda`` unchanged).
        """
        weights = np.empty(neighbour_index.shape)

        def solve(rows: np.ndarray, sets: np.ndarray, chosen: np.ndarray, system: dict[str, np.ndarray]) -> None:
            white_cross, gap = self._target_terms(targets[rows], None if covariates0 is None else covariates0[rows],
                                                  sets, chosen, system)
            white_design = system["white_design"][chosen]
            gap -= np.einsum("bji,bj->bi", white_design, white_cross)
            trend_factors = system["trend_factors"][chosen]
            multipliers = back_substitution(trend_factors, forward_substitution(trend_factors, gap[:, :, None]))
            white_cross += (white_design @ multipliers)[:, :, 0]
            found = back_substitution(system["factors"][chosen], white_cross[:, :, None])[:, :, 0]
            found[self._unsolvable(system, chosen)] = np.nan
            weights[rows] = found

        return self._in_stacks(neighbour_index, pool, solve), weights

    def _in_chunks(self, count: int, size: int,
                   solve: Callable[[slice, ThreadPoolExecutor], tuple[np.ndarray, np.ndarray]],
                   progress: Callable[[float], None] | None,
                   should_stop: Callable[[], bool] | None) -> tuple[np.ndarray, np.ndarray]:
        """Mean and variance of ``count`` targets, ``solve``-d ``size`` at a time with progress and cancel.

        The mean is (count,) for one field given as (n,) values, else (count, fields).
        Sets :attr:`last_unresolved`.
        """
        prediction = np.empty((count, self._residual.shape[1]))
        variance = np.empty(count)
        chunks = [slice(start, start + size) for start in range(0, count, size)]
        with ThreadPoolExecutor(max_workers=WORKERS) as pool:
            for done, chunk in enumerate(chunks, start=1):
                if should_stop is not None and should_stop():
                    raise Cancelled("Local kriging was cancelled.")
                prediction[chunk], variance[chunk] = solve(chunk, pool)
                if progress is not None:
                    progress(done / len(chunks))
        self.last_unresolved = int(np.count_nonzero(np.isnan(variance)))
        return (prediction[:, 0] if self._single_field else prediction), variance

    def leave_one_out(self, *, progress: Callable[[float], None] | None = None,
                      should_stop: Callable[[], bool] | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Each sample predicted by local kriging from its ``neighbours`` nearest other samples.

        The ``k + 1`` nearest samples of each sample are searched in the
        anisotropy frame and the sample itself is dropped (if coincident
        samples tie with it, the farthest of the ``k + 1`` is dropped
        instead), so ``k = min(neighbours, n - 1)`` others remain. The local
        system is the one of :meth:`predict` (its trend re-estimated from
        those neighbours, or the global trend's residuals kriged). ``progress`` and ``should_stop`` are as for
        :meth:`predict`; samples are taken :data:`LEAVE_ONE_OUT_CHUNK` at a time.

        Returns
        -------
        mean : ndarray of shape (n,), or (n, m) for m fields
            Prediction of each sample value (u).
        variance : ndarray of shape (n,)
            Prediction-error variance of the observation, nugget included
            (u2): the latent kriging variance plus the nugget (and the sample's
            own error variance, when given), shared by the fields. Both NaN for samples with too few other
            samples within the search radius (or a singular local system),
            counted in :attr:`last_unresolved`.

        With a global trend its coefficients come from all samples, the left-out one included.
        """
        k = min(self.neighbours, self.n - 1)
        found = self._nearest(self._frame_xy, k + 1)
        keep = found != np.arange(self.n)[:, None]
        keep[keep.all(axis=1), -1] = False
        others = found[keep].reshape(self.n, k)
        mean, variance = self._in_chunks(
            self.n, LEAVE_ONE_OUT_CHUNK, lambda chunk, pool: self._predict_found(
                self._frame_xy[chunk], self._leave_one_out_terms(chunk), others[chunk], pool), progress, should_stop)
        own = 0.0 if self.error_variance is None else self.error_variance
        return mean, variance + self.covariance.nugget + own


    def _leave_one_out_terms(self, chunk: slice) -> np.ndarray | None:
        """What :meth:`_predict_found` takes beside samples ``chunk`` as targets: design rows or covariates."""
        if self.trend is not None:
            return self._global_design[chunk]
        return None if self._covariates is None else self._covariates[chunk]


ROW_HASH_SEED = 20261202
"""Seed of the fixed random weights that hash rows of sample indices (see :func:`distinct_rows`)."""


def distinct_rows(rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The distinct rows of an integer array (b, k), and for each row the index of its distinct row.

    Rows are hashed by their dot product with fixed random 64-bit weights
    (seed :data:`ROW_HASH_SEED`, wrapping on overflow) and the hashes made
    unique, which is several times faster than sorting whole rows; the grouping
    is then checked exactly (every row equal to its group's first row), and on a
    hash collision the rows are grouped by ``numpy.unique(..., axis=0)`` instead.
    """
    weights = np.random.default_rng(ROW_HASH_SEED).integers(1, 2 ** 62, size=rows.shape[1], dtype=np.int64)
    hashes = rows.astype(np.int64) @ weights
    _, first, inverse = np.unique(hashes, return_index=True, return_inverse=True)
    distinct = rows[first]
    if not np.array_equal(distinct[inverse], rows):
        distinct, inverse = np.unique(rows, axis=0, return_inverse=True)
    return distinct, inverse.reshape(-1)


