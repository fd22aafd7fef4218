"""Kriging prediction: simple, ordinary and universal kriging in one predictor.

Notation (attribute units ``u``, squared units ``u2``): ``K`` is the (n, n)
covariance matrix of the observations (structures plus nugget on the
diagonal, ``u2``), ``y`` the (n,) observed values, ``F`` the (n, p) design
matrix of the mean model and ``c0`` the (n,) covariance between the latent
field at a target ``x0`` and the observations (no nugget). With a known mean
``m`` (simple kriging) ``p = 0`` and ``y`` is replaced by ``y - m``.

With ``A = F^T K^-1 F`` the generalised-least-squares (GLS) trend
coefficients are ``beta = A^-1 F^T K^-1 y`` and the kriging predictor and
its error variance are (Rasmussen & Williams 2006, *Gaussian Processes for
Machine Learning*, section 2.7, eq. 2.41-2.42; Cressie 1993, *Statistics
for Spatial Data*, rev. ed., section 3.4 on universal kriging)::

    mean(x0)     = f0^T beta + c0^T K^-1 (y - F beta)
    variance(x0) = C(0) - c0^T K^-1 c0 + g^T A^-1 g,   g = f0 - F^T K^-1 c0

where ``C(0)`` is the latent-field variance (sill without nugget). Adding
the nugget gives the error variance for a new measurement at ``x0``.

Measurement error. Per-sample measurement-error variances ``e`` (data, not
model: they come with the samples) add to the diagonal, ``K = C + nugget I +
diag(e)``, and change nothing else: ``c0`` is still the latent covariance, so
the prediction is of the true value without measurement error. The nugget
stays the model's uncorrelated part beside ``e`` (micro-scale variation and
any measurement error that ``e`` leaves out).

Algebra: ``K = L L^T`` (Cholesky) is factorised once and ``L^-1`` is kept.
Per chunk of targets the (n, m) cross-covariance ``C0`` is built, the mean
is the product ``alpha^T C0`` with ``alpha = K^-1 (y - F beta)``, and
``W = L^-1 C0`` (one matrix product, done by row blocks that skip the zero
upper triangle of ``L^-1``) gives ``c0^T K^-1 c0`` as the squared column
norms of ``W`` and ``F^T K^-1 c0 = (L^-1 F)^T W``.

Several fields. The weights and the variance do not depend on ``y``, and
the mean is linear in it (Cressie 1993, section 3.4), so ``m`` fields
observed at the same samples and sharing one covariance and mean model are
predicted with one factorisation: ``y`` becomes an (n, m) matrix, ``beta``
(p, m) and ``alpha`` (n, m), one column per field, and the variance is
shared. A known mean is one value subtracted from every field.

The formulas hold for any target that is a linear functional of the latent
field, such as its average over a block: replace ``c0`` by the target's
covariance with the observations, ``f0`` by its mean-model terms and ``C(0)``
by its own variance (:meth:`KrigingPredictor.predict_from_covariances`, used
for points by :meth:`KrigingPredictor.predict` and for blocks by
:func:`.block.block_predict`).
"""
from __future__ import annotations

from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor

import numpy as np
from scipy import linalg

from ..errors import Cancelled, FieldcastError, FieldcastUsageError
from ..io.samples import check_error_variance
from ..linalg.batched import WORKERS
from ..linalg.condition_policy import CONDITION_ADVICE, reciprocal_condition, usable, warning_text
from ..model.covariance import CovarianceModel
from ..model.mean import MeanModel

MORE_SAMPLES_ADVICE = ("Use more samples, or refit the model with a simpler TREND (constant) in 'Fit covariance "
                       "model'.")
"""What the user can change when there are too few samples for the model's mean terms."""

NEGATIVE_VARIANCE_TOLERANCE = 1e-8
"""Negative variances above ``-tolerance * sill`` are round-off and become 0."""

_BLOCK_ROWS = 128
"""Rows of ``L^-1`` per block in the triangular product."""

_PIECE_COLUMNS = 256
"""Targets per cross-covariance piece (keeps temporaries small enough for the cache)."""


def as_points(xy: np.ndarray, what: str) -> np.ndarray:
    """Validate an (n, 2) coordinate array; raise FieldcastError naming ``what``."""
    points = np.asarray(xy, dtype=float)
    if points.ndim != 2 or points.shape[1] != 2:
        raise FieldcastError(
            f"{what} must be an (n, 2) array of easting and northing; got shape {points.shape}."
        )
    if not np.all(np.isfinite(points)):
        bad = int(np.count_nonzero(~np.all(np.isfinite(points), axis=1)))
        raise FieldcastError(f"{what}: {bad} point(s) have NaN or infinite coordinates; drop or fix them.")
    return points


def as_value_columns(values: np.ndarray, n: int) -> np.ndarray:
    """Validate sample values of one field (n,) or of m fields at the same points (n, m).

    Raises FieldcastError on another shape, no field, or NaN/infinite values (naming the columns of an (n, m) array).
    """
    array = np.asarray(values, dtype=float)
    if array.ndim not in (1, 2) or len(array) != n or array.shape[1:] == (0,):
        raise FieldcastError(
            f"Expected {n} sample values (one per point): an array of shape ({n},) for one field or "
            f"({n}, m) for m fields observed at the same points; got an array of shape {array.shape}."
        )
    not_finite = ~np.isfinite(array)
    bad = int(np.count_nonzero(not_finite))
    if bad:
        columns = ""
        if array.ndim == 2:
            columns = " (in column(s) " + ", ".join(str(j) for j in np.flatnonzero(not_finite.any(axis=0))) + ")"
        raise FieldcastError(
            f"{bad} sample value(s){columns} are NaN or infinite; drop those samples or fill them in."
        )
    return array


def column_squared_norms(matrix: np.ndarray) -> np.ndarray:
    """Sum of squares of each column of a 2-D array (no temporary copy)."""
    return np.einsum("ij,ij->j", matrix, matrix)


def check_distinct(xy: np.ndarray) -> None:
    """Raise FieldcastError when two samples share a location (singular system without nugget)."""
    unique, counts = np.unique(xy, axis=0, return_counts=True)
    repeated = counts > 1
    if np.any(repeated):
        x, y = unique[repeated][0]
        raise FieldcastError(
            f"{int(np.sum(counts[repeated]))} samples coincide at {int(np.sum(repeated))} location(s) "
            f"(for example at x={x:g}, y={y:g}) and the covariance model has no nugget, so the kriging "
            "system is singular. Average the values of coincident samples, or give the model a nugget (the "
            "model file's \"nugget\", or refit it with 'Fit covariance model', which estimates one)."
        )


def checked_variance(variance: np.ndarray, sill: float, *, unresolved_allowed: bool = False,
                     system: str = "the covariance matrix") -> np.ndarray:
    """Kriging variances with round-off below zero set to 0; clearly negative ones refused.

    A variance below ``-NEGATIVE_VARIANCE_TOLERANCE * sill`` cannot come from
    round-off in a well-posed system, so it raises instead of being hidden.

    Parameters
    ----------
    variance : ndarray
        Kriging error variances (u2); not modified.
    sill : float
        Total sill of the covariance model (u2), the scale of the tolerance.
    unresolved_allowed : bool
        True keeps NaN (a target left unresolved, as in local kriging);
        False refuses any non-finite variance.
    system : str
        What was solved, for the message (e.g. "some neighbourhood system").

    Returns
    -------
    ndarray
        A new array, ``max(variance, 0)`` (NaN kept when allowed).

    Raises
    ------
    FieldcastError
        For a clearly negative variance, or a non-finite one when not allowed.
    """
    variance = np.asarray(variance, dtype=float)
    if not unresolved_allowed and not np.all(np.isfinite(variance)):
        raise FieldcastError("Kriging produced non-finite variances; check the model file's nugget, partial sills "
                             "and ranges, or refit it with 'Fit covariance model'.")
    lowest = float(np.nanmin(variance, initial=0.0))
    if lowest < -NEGATIVE_VARIANCE_TOLERANCE * sill:
        raise FieldcastError(
            f"Kriging variance came out clearly negative ({lowest:.3g} with sill {sill:.3g}): {system} is too "
            "close to singular for reliable results. " + CONDITION_ADVICE
        )
    return np.where(variance < 0.0, 0.0, variance)


def cholesky_factor(matrix: np.ndarray, what: str, remedy: str, warnings: list[str] | None = None) -> np.ndarray:
    """Lower Cholesky factor of a symmetric (k, k) matrix, refusing numerically singular ones.

    The rule of :mod:`..linalg.condition_policy` applies to the dpocon
    reciprocal condition estimate: below ``k * UNIT_ROUNDOFF`` the matrix
    cannot be told apart from a singular one and FieldcastError is raised
    (message ``what`` + ``remedy``); below the warning level the factor is
    returned and, when ``warnings`` is given, a warning naming the condition
    estimate and what to change is appended to it.
    """
    try:
        factor = linalg.cholesky(matrix, lower=True, check_finite=False)
    except linalg.LinAlgError:
        raise FieldcastError(f"The {what} is not positive definite. {remedy}") from None
    estimate = reciprocal_condition(matrix, factor)
    if not usable(estimate, len(matrix)):
        raise FieldcastError(
            f"The {what} is numerically singular (reciprocal condition number {estimate:.1e}). {remedy}"
        )
    message = warning_text(what, estimate)
    if message is not None and warnings is not None:
        warnings.append(message)
    return factor


def target_covariates(covariates0: np.ndarray | None, count: int) -> np.ndarray | None:
    """External-drift values at ``count`` targets as a float array (count, q); None stays None."""
    if covariates0 is None:
        return None
    covariates0 = np.asarray(covariates0, dtype=float)
    if len(covariates0) != count:
        raise FieldcastError(f"Got covariate values for {len(covariates0)} prediction locations but there "
                             f"are {count} locations.")
    return covariates0.reshape(count, -1)


class KrigingPredictor:
    """Kriging predictor built once from samples, a covariance model and a mean model.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations in CRS units.
    values : ndarray of shape (n,) or (n, m)
        Sample values in the modelling scale (attribute units); (n, m) for m
        fields observed at the same points that share ``covariance`` and
        ``mean`` (predicted together, one factorisation).
    covariance : CovarianceModel
        Covariance of the field; its nugget is the measurement-error variance.
    mean : MeanModel
        ``kind == "known"`` gives simple kriging around ``known_value`` (one
        value for every field: subtract per-field means from the columns
        first and add them back to the predictions if they differ);
        ``"constant"`` ordinary kriging; ``"linear"``/``"quadratic"`` and
        covariate columns universal kriging (external drift).
    covariates : ndarray of shape (n, k), optional
        Covariate values at the samples when the mean model names covariates.
    error_variance : ndarray of shape (n,), optional
        Measurement-error variance of each sample (u2), added to the diagonal of ``K`` beside the nugget.

    Attributes
    ----------
    n : int
        Number of samples.
    xy : ndarray of shape (n, 2)
        Sample locations (a copy of the input), CRS units.
    coefficients : ndarray of shape (p,) or (p, m)
        GLS trend coefficients ``beta`` in the order of ``mean.term_names``,
        one column per field for 2-D values (no rows for a known mean).
    warnings : list of str
        Warnings for the caller to log: an ill-conditioned but usable covariance
        or trend matrix (see :mod:`..linalg.condition_policy`).
    """

    def __init__(self, xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel,
                 covariates: np.ndarray | None = None, error_variance: np.ndarray | None = None) -> None:
        points = as_points(xy, "Sample coordinates")
        observed = as_value_columns(values, len(points))
        self.n = len(points)
        if self.n == 0:
            raise FieldcastError("Kriging needs at least one sample; none were given.")
        n_terms = mean.n_terms
        if self.n <= n_terms:
            raise FieldcastError(
                f"The {mean.kind} mean model has {n_terms} term(s) but there are only {self.n} samples. "
                + MORE_SAMPLES_ADVICE
            )
        if error_variance is not None:
            error_variance = check_error_variance(error_variance, self.n)
        if covariance.nugget == 0 and (error_variance is None or not error_variance.min() > 0):
            check_distinct(points)
        self.covariance = covariance
        self.mean = mean
        self.xy = points.copy()
        self.error_variance = error_variance
        self.warnings: list[str] = []
        factor = cholesky_factor(covariance.data_covariance(points, error_variance), "covariance matrix of the samples",
                                 CONDITION_ADVICE, self.warnings)
        self._inverse_factor = linalg.solve_triangular(factor, np.eye(self.n), lower=True, check_finite=False)
        self._blocks = [(start, min(start + _BLOCK_ROWS, self.n)) for start in range(0, self.n, _BLOCK_ROWS)]
        design = mean.design(points, covariates)
        whitened_values = self._inverse_factor @ (observed - mean.known_mean(1)[0])
        self._whitened_design = self._inverse_factor @ design  # L^-1 F, (n, p)
        if n_terms:
            self._trend_scale, self._trend_factor = self._factor_trend()
            self.coefficients = self._trend_solve(self._whitened_design.T @ whitened_values)
        else:
            self.coefficients = np.zeros((0,) + observed.shape[1:])
        self._alpha = self._inverse_factor.T @ (whitened_values - self._whitened_design @ self.coefficients)

    def _factor_trend(self) -> tuple[np.ndarray, np.ndarray]:
        """Equilibrated Cholesky factor of ``A = F^T K^-1 F`` (columns scaled to unit diagonal)."""
        trend_matrix = self._whitened_design.T @ self._whitened_design
        diagonal = np.diag(trend_matrix)
        zero_terms = [name for name, size in zip(self.mean.term_names, diagonal) if not size > 0]
        if zero_terms:
            raise FieldcastError(
                f"The trend term(s) {', '.join(zero_terms)} are zero at every sample, so the samples cannot "
                "estimate them. Leave them out of the mean: refit the model with a simpler TREND (constant) in 'Fit "
                "covariance model', or, in Python, without those covariates."
            )
        scale = 1.0 / np.sqrt(diagonal)
        factor = cholesky_factor(
            trend_matrix * np.outer(scale, scale), "trend (mean model) matrix",
            "The trend terms cannot be told apart at these samples (points on a line, a constant or "
            "duplicated covariate, or too few samples); refit the model with a simpler TREND.",
            self.warnings)
        return scale, factor

    def _trend_whiten(self, gap: np.ndarray) -> np.ndarray:
        """``R^-1 D gap`` with ``D A D = R R^T``, so its squared norm is ``gap^T A^-1 gap``."""
        scaled_gap = self._trend_scale[:, None] * gap.reshape(len(gap), -1)
        return linalg.solve_triangular(self._trend_factor, scaled_gap, lower=True, check_finite=False)

    def _trend_solve(self, right: np.ndarray) -> np.ndarray:
        """``A^-1 right`` for a (p,) or (p, m) right-hand side."""
        solved = linalg.solve_triangular(self._trend_factor, self._trend_whiten(right), lower=True,
                                         trans="T", check_finite=False)
        return (self._trend_scale[:, None] * solved).reshape(right.shape)

    def _whiten(self, matrix: np.ndarray) -> np.ndarray:
        """``L^-1 matrix`` for an (n, m) matrix, skipping the zero upper triangle of ``L^-1``."""
        out = np.empty_like(matrix)
        for start, stop in self._blocks:
            np.matmul(self._inverse_factor[start:stop, :stop], matrix[:stop], out=out[start:stop])
        return out

    def _cross_covariance(self, xy0: np.ndarray, pool: ThreadPoolExecutor) -> np.ndarray:
        """Cross-covariance ``C0`` (n, m) between samples and targets, pieces evaluated in ``pool``."""
        cross = np.empty((self.n, len(xy0)))

        def fill(start: int) -> None:
            stop = start + _PIECE_COLUMNS
            cross[:, start:stop] = self.covariance.cross_covariance(self.xy, xy0[start:stop])

        list(pool.map(fill, range(0, len(xy0), _PIECE_COLUMNS)))
        return cross

    def _whitened_gap(self, cross: np.ndarray, design0: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``W = L^-1 C0`` and the trend gap ``g = F0^T - F^T K^-1 C0`` ((0, m) for a known mean)."""
        whitened = self._whiten(cross)
        if design0.shape[1]:
            gap = design0.T - self._whitened_design.T @ whitened
        else:
            gap = np.zeros((0, cross.shape[1]))
        return whitened, gap

    def predict(self, xy0: np.ndarray, covariates0: np.ndarray | None = None, *, include_nugget: bool = False,
                chunk_size: int = 2048, progress: Callable[[float], None] | None = None,
                should_stop: Callable[[], bool] | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Kriging mean and error variance at target locations, ``chunk_size`` targets at a time.

        Parameters
        ----------
        xy0 : ndarray of shape (M, 2)
            Target locations in CRS units.
        covariates0 : ndarray of shape (M, k), optional
            Covariate values at the targets when the mean model names covariates.
        include_nugget : bool
            False: variance of the latent field's prediction error (u2).
            True: add the nugget, the error variance for a new measurement.
        chunk_size : int
            Targets per chunk; memory is about ``3 * n * chunk_size * 8`` bytes.
        progress, should_stop : callable, optional
            Called per chunk with the finished fraction / asked whether to stop
            (raises :class:`Cancelled`).

        Returns
        -------
        mean : ndarray of shape (M,), or (M, m) for m fields
            Prediction (u), one column per field.
        variance : ndarray of shape (M,)
            Error variance (u2, never negative), shared by the fields.
        """
        targets = as_points(xy0, "Prediction locations")
        if int(chunk_size) < 1:
            raise FieldcastError(f"chunk_size must be a positive number of locations; got {chunk_size!r}.")
        total = len(targets)
        covariates0 = target_covariates(covariates0, total)
        prediction = np.empty((total,) + self._alpha.shape[1:])
        variance = np.empty(total)
        with ThreadPoolExecutor(max_workers=WORKERS) as pool:
            for start in range(0, total, int(chunk_size)):
                if should_stop is not None and should_stop():
                    raise Cancelled("Kriging prediction was cancelled.")
                stop = min(start + int(chunk_size), total)
                chunk_covariates = None if covariates0 is None else covariates0[start:stop]
                cross = self._cross_covariance(targets[start:stop], pool)
                design0 = self.mean.design(targets[start:stop], chunk_covariates)
                prediction[start:stop], variance[start:stop] = self.predict_from_covariances(
                    cross, design0, self.covariance.field_variance)
                if progress is not None:
                    progress(stop / total)
        if include_nugget:
            variance += self.covariance.nugget
        return prediction, variance

    def predict_from_covariances(self, cross: np.ndarray, design0: np.ndarray,
                                 prior_variance: float | np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Kriging mean and error variance of targets given by their covariances with the samples.

        A target is any linear functional of the latent field: a point, or the
        average over a block. With ``c0`` its column of ``cross``, ``f0`` its row
        of ``design0`` and ``C(0)`` its ``prior_variance``::

            mean     = f0^T beta + c0^T K^-1 (y - F beta)     (+ the known mean)
            variance = C(0) - c0^T K^-1 c0 + g^T A^-1 g,   g = f0 - F^T K^-1 c0

        Parameters
        ----------
        cross : ndarray of shape (n, m)
            Covariance between the latent field at the samples and each target (u2, no nugget).
        design0 : ndarray of shape (m, p)
            Mean-model terms of the targets (``p = mean.n_terms``; for a block, the block
            average of the terms); shape (m, 0) for a known mean.
        prior_variance : float or ndarray of shape (m,)
            Variance of each target itself (u2): the field variance for a point, the mean
            covariance over pairs of block points for a block.

        Returns
        -------
        mean : ndarray of shape (m,), or (m, fields) for 2-D sample values
            Prediction (u), one column per field.
        variance : ndarray of shape (m,)
            Error variance of the latent target (u2, never negative), shared by the fields.
        """
        cross = np.asarray(cross, dtype=float)
        design0 = np.asarray(design0, dtype=float)
        if cross.ndim != 2 or len(cross) != self.n or design0.shape != (cross.shape[1], self.mean.n_terms):
            raise FieldcastError(
                f"Expected covariances of shape ({self.n}, m) and mean terms of shape (m, {self.mean.n_terms}); "
                f"got {cross.shape} and {design0.shape}."
            )
        whitened, gap = self._whitened_gap(cross, design0)
        mean = cross.T @ self._alpha + self.mean.known_mean(1)[0]
        variance = np.asarray(prior_variance, dtype=float) - column_squared_norms(whitened)
        if len(gap):
            mean += design0 @ self.coefficients
            variance += column_squared_norms(self._trend_whiten(gap))
        return mean, checked_variance(variance, self.covariance.sill)

    def error_factors(self, xy0: np.ndarray, covariates0: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Factors of the kriging error covariance between targets: ``W = L^-1 C0`` and ``H = R^-1 D g``.

        The covariance of the (latent) prediction errors at targets ``a`` and ``b`` is::

            C(a, b) - c_a^T K^-1 c_b + g_a^T A^-1 g_b  =  C(a, b) - W_a^T W_b + H_a^T H_b

        (the variance of :meth:`predict` on the diagonal), which is also the covariance of the latent field
        at ``a`` and ``b`` given the samples when the trend coefficients have a flat prior (Rasmussen &
        Williams 2006, section 2.7).

        Returns
        -------
        W : ndarray of shape (n, m)
        H : ndarray of shape (p, m); (0, m) for a known mean
        """
        targets = as_points(xy0, "Prediction locations")
        covariates0 = target_covariates(covariates0, len(targets))
        with ThreadPoolExecutor(max_workers=WORKERS) as pool:
            cross = self._cross_covariance(targets, pool)
        whitened, gap = self._whitened_gap(cross, self.mean.design(targets, covariates0))
        return whitened, (self._trend_whiten(gap) if len(gap) else gap)

    def joint_predict(self, xy0: np.ndarray, covariates0: np.ndarray | None = None, *,
                      group_size: int | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Kriging mean and full error covariance of the latent field at a few targets (one joint law).

        With ``C0`` the (n, m) cross-covariance, ``C00`` the (m, m) latent covariance among the targets
        and ``G`` the (p, m) trend gaps (the columns of ``g`` above), the conditional covariance given the
        data (Rasmussen & Williams 2006, eq. 2.24, with the trend term of Cressie 1993, section 3.4) is::

            Sigma = C00 - C0^T K^-1 C0 + G^T A^-1 G

        Its diagonal is :meth:`predict`'s variance. With ``group_size = k`` the targets are consecutive
        groups of ``k`` (the points of one cell each) and only the covariance within each group is formed.
        Memory is about ``8 (n + m) m`` bytes without groups (``8 (n + k) m`` with them).

        Returns
        -------
        mean : ndarray of shape (m,), or (m, fields)
            Prediction (u).
        covariance : ndarray of shape (m, m), or (m / k, k, k) with groups
            Error covariance of the latent field (u2), symmetric; its diagonal is never negative.
        """
        targets = as_points(xy0, "Prediction locations")
        covariates0 = target_covariates(covariates0, len(targets))
        size = len(targets) if group_size is None else int(group_size)
        if size < 1 or len(targets) % size:
            raise FieldcastUsageError(f"{len(targets)} targets do not split into groups of {group_size}.")
        cross = self.covariance.cross_covariance(self.xy, targets)
        design0 = self.mean.design(targets, covariates0)
        whitened, gap = self._whitened_gap(cross, design0)
        mean = cross.T @ self._alpha + self.mean.known_mean(1)[0]
        groups = targets.reshape(-1, size, 2)
        covariance = self.covariance.covariance_from_offsets(groups[:, :, None, 0] - groups[:, None, :, 0],
                                                             groups[:, :, None, 1] - groups[:, None, :, 1])
        whitened = whitened.reshape(self.n, -1, size)
        covariance = covariance - np.einsum("nga,ngb->gab", whitened, whitened)
        if len(gap):
            mean += design0 @ self.coefficients
            trend = self._trend_whiten(gap).reshape(len(gap), -1, size)
            covariance += np.einsum("pga,pgb->gab", trend, trend)
        covariance = (covariance + covariance.transpose(0, 2, 1)) / 2.0
        on_diagonal = np.arange(size)
        covariance[:, on_diagonal, on_diagonal] = checked_variance(covariance[:, on_diagonal, on_diagonal],
                                                                   self.covariance.sill)
        return mean, covariance[0] if group_size is None else covariance

    def weights(self, xy0: np.ndarray, covariates0: np.ndarray | None = None) -> np.ndarray:
        """Kriging weights ``lambda`` with ``mean(x0) = lambda^T y`` (plus the known mean term).

        ``lambda = K^-1 c0 + K^-1 F A^-1 (f0 - F^T K^-1 c0)``. Under ordinary
        kriging each column sums to one; under simple kriging the weights act
        on ``y - m`` and the known mean ``m`` gets weight ``1 - sum(lambda)``.

        Returns
        -------
        ndarray of shape (n, m)
        """
        targets = as_points(xy0, "Prediction locations")
        covariates0 = target_covariates(covariates0, len(targets))
        with ThreadPoolExecutor(max_workers=WORKERS) as pool:
            cross = self._cross_covariance(targets, pool)
        whitened, gap = self._whitened_gap(cross, self.mean.design(targets, covariates0))
        if len(gap):
            whitened = whitened + self._whitened_design @ self._trend_solve(gap)
        return self._inverse_factor.T @ whitened

    def projected_precision(self) -> tuple[np.ndarray, np.ndarray]:
        """Matrix ``Q`` and vector ``Q y`` used by closed-form cross-validation.

        ``Q = K^-1`` for a known mean and ``Q = K^-1 - K^-1 F A^-1 F^T K^-1``
        otherwise (Dubrule 1983, *Math. Geol.* 15(6), 687-699); ``Q y`` equals
        ``K^-1 (y - F beta)`` (``y - m`` for a known mean).

        Returns
        -------
        Q : ndarray of shape (n, n), u2^-1
        Qy : ndarray of shape (n,), or (n, m) for m fields, u^-1
        """
        precision = self._inverse_factor.T @ self._inverse_factor
        if len(self.coefficients):
            solved_design = self._inverse_factor.T @ self._whitened_design  # K^-1 F
            precision -= solved_design @ self._trend_solve(solved_design.T)
        return (precision + precision.T) / 2.0, self._alpha.copy()
