"""Exact Gaussian log-likelihood of a covariance model: restricted (REML) or full (ML).

Observations ``y`` (n values) have mean ``F beta`` (``F``: n x p design
matrix from :meth:`.mean.MeanModel.design`) and covariance ``K`` (the
structures plus the nugget on the diagonal, plus per-sample measurement-error
variances ``diag(e)`` when the data carry them: a fixed, known part of ``K``
whose derivative by every parameter is 0, so the gradients below hold as they
are). With
``beta_GLS = (F^T K^-1 F)^-1 F^T K^-1 y`` and ``r = y - F beta_GLS``:

ML (beta profiled out; a known mean has p = 0 and ``r = y - known_value``)::

    -2 l = n log(2 pi) + log|K| + r^T K^-1 r

REML (Patterson & Thompson 1971, *Biometrika* 58; Harville 1977, *JASA* 72)::

    -2 l_R = (n - p) log(2 pi) + log|K| + log|F^T K^-1 F| + y^T P y
    P = K^-1 - K^-1 F (F^T K^-1 F)^-1 F^T K^-1

Constant convention: the REML value is exactly the expression above, without
Harville's extra ``- log|F^T F|`` term, so it depends on how the columns of
``F`` are scaled; compare REML values only between fits with the same mean
model (same terms, same frame). ``y^T P y = r^T K^-1 r``, so both methods
share the vector ``a = P y = K^-1 r``.

Gradients (Harville 1977; Rasmussen & Williams 2006, eq. 5.9), for a
covariance parameter ``theta``::

    REML: dl_R/dtheta = 1/2 tr((P y y^T P - P) dK/dtheta)
    ML:   dl/dtheta   = 1/2 tr((a a^T - K^-1) dK/dtheta)

evaluated as ``1/2 (a^T D a - sum(W * D))`` with ``D = dK/dtheta`` and
``W = P`` or ``K^-1`` (both symmetric), so no n x n product is formed.

Numerics: Cholesky factors (``scipy.linalg.cho_factor``); a matrix that is
not positive definite (e.g. coincident samples and a zero nugget) gets the
smallest diagonal jitter of the fit rule in :mod:`..linalg.condition_policy`
(:func:`..linalg.condition_policy.jittered_cholesky`), which is reported, never
a silent NaN. The
design enters through an orthonormal basis ``F = Q R``:
``log|F^T K^-1 F| = log|Q^T K^-1 Q| + 2 log|det R|`` exactly, while the
solves use the well-conditioned ``Q``.
"""
from __future__ import annotations

import math
import warnings
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy import linalg
from scipy.linalg import blas, lapack

from ..errors import Cancelled, FieldcastError
from ..io.samples import check_error_variance, check_samples
from ..linalg.condition_policy import FIT_CONDITION_ADVICE, checked_cholesky, jittered_cholesky
from ..model.covariance import CovarianceModel
from ..model.mean import MeanModel
from ..model.parameters import ParameterLayout, covariance_derivatives

LIKELIHOOD_METHODS = ("reml", "ml")
"""Likelihoods this module evaluates."""

LOG_2PI = math.log(2.0 * math.pi)

TREND_WHAT = "trend's matrix of the likelihood (F^T K^-1 F, the precision of the trend coefficients)"
OVERFLOW_REMEDY = ("The covariance model is numerically singular at these samples: merge samples at the same "
                   "location, choose a less smooth KERNEL in 'Fit covariance model', or, for an attribute with a tiny "
                   "variance, rescale it to larger numbers (finer units).")
"""What to change when a likelihood's solves overflow or lose the trend (exact and Vecchia likelihoods)."""


def check_finite_terms(*terms: np.ndarray | float) -> None:
    """Refuse a likelihood evaluation whose solves overflowed (an infinite or missing value in ``terms``).

    Raises
    ------
    FieldcastError
        If any entry of ``terms`` is not finite.
    """
    if not all(np.all(np.isfinite(term)) for term in terms):
        raise FieldcastError("The likelihood could not be evaluated in double precision (a solve overflowed). "
                             + OVERFLOW_REMEDY)


@dataclass(frozen=True)
class MeanBasis:
    """Orthonormal basis ``Q`` of the design ``F = Q R`` and the term ``2 log|det R|``."""

    q: np.ndarray
    r: np.ndarray
    log_det_r_squared: float

    @classmethod
    def from_design(cls, design: np.ndarray) -> MeanBasis:
        """Thin QR of a design matrix; FieldcastError when its columns are dependent."""
        design = np.asarray(design, dtype=float)
        if design.shape[1] == 0:
            return cls(design, np.zeros((0, 0)), 0.0)
        if design.shape[1] >= design.shape[0]:
            raise FieldcastError(
                f"The mean model has {design.shape[1]} terms but there are only {design.shape[0]} samples; "
                "choose a simpler TREND (constant needs 2 samples, linear 4, quadratic 7; each covariate adds a "
                "term, and a class covariate one per class but its baseline: a raster of many codes belongs in "
                "COVARIATES, not CLASS_COVARIATES, or needs its classes merged) or add samples."
            )
        q, r = np.linalg.qr(design)
        diagonal = np.abs(np.diag(r))
        if diagonal.min() <= 1e-10 * diagonal.max():
            raise FieldcastError(
                "The mean terms are linearly dependent at the samples (a covariate is constant, or repeats "
                "another term); drop that covariate or choose a simpler TREND."
            )
        return cls(q, r, 2.0 * float(np.sum(np.log(diagonal))))

    def contrasts(self, method: str) -> int:
        """``n - p`` for REML, ``n`` for ML: the number of error contrasts the likelihood counts."""
        n, p = self.q.shape
        return n - p if method == "reml" else n

    def residual_rms(self, y: np.ndarray) -> np.ndarray:
        """Root mean square of the least-squares residual ``y - Q Q^T y``: a scalar for (n,) ``y``, one per column
        of (n, m) ``y``."""
        residual = y - self.q @ (self.q.T @ y)
        return np.sqrt(np.mean(residual ** 2, axis=0))

    def coefficients(self, basis_coefficients: np.ndarray) -> np.ndarray:
        """Coefficients for the columns of ``F`` from those for the columns of ``Q``."""
        if self.r.size == 0:
            return np.zeros(0)
        return linalg.solve_triangular(self.r, basis_coefficients, lower=False)


@dataclass(frozen=True)
class LikelihoodTerms:
    """One likelihood evaluation.

    Attributes
    ----------
    minus_two_log_likelihood : float
        ``-2 l`` (ML) or ``-2 l_R`` (REML).
    weights : ndarray of shape (n,), or (n, m) for several fields
        ``a = P y = K^-1 r``.
    basis_coefficients : ndarray of shape (p,), or (p, m) for several fields
        GLS coefficients for the columns of the orthonormal basis ``Q``.
    pair_weights : ndarray or None
        ``2 (W - a a^T)`` at the sample pairs asked for (``W = P`` for REML,
        ``K^-1`` for ML); None when no pairs were asked for.
    diagonal_weight : float
        ``tr(W) - a^T a`` (0 when no pairs were asked for).
    precision : ndarray of shape (n, n) or None
        ``W``, lower triangle only (the upper one is not set); None when no
        pairs were asked for.
    jitter : float
        Value added to the diagonal of ``K`` to factorise it (0 normally).
    """

    minus_two_log_likelihood: float
    weights: np.ndarray
    basis_coefficients: np.ndarray
    pair_weights: np.ndarray | None
    diagonal_weight: float
    precision: np.ndarray | None
    jitter: float

    def gradient_term(self, pair_derivative: np.ndarray, diagonal_derivative: float) -> float:
        """``d(-2 l)/dtheta = sum((W - a a^T) * D)`` from one triangle and the diagonal of ``D``.

        ``D = dK/dtheta`` is symmetric with a constant diagonal, so the sum
        over all entries is twice the sum over the pairs plus the diagonal.
        """
        return float(self.pair_weights @ pair_derivative + diagonal_derivative * self.diagonal_weight)


def jitter_message(jitter: float) -> str:
    """Plain-words warning for a covariance matrix that needed a diagonal jitter."""
    return (
        f"The covariance matrix of the samples was not numerically positive definite; {jitter:.3g} was added "
        "to its diagonal. This usually means samples at (nearly) the same location with a (near) zero "
        "nugget. " + FIT_CONDITION_ADVICE
    )


@dataclass(frozen=True)
class GlsSolution:
    """The solves one likelihood evaluation shares between its value and its gradient.

    Attributes
    ----------
    factor : tuple
        Lower Cholesky factor of ``K`` (with any jitter), as from ``scipy.linalg.cho_factor``.
    jitter : float
        Value added to the diagonal of ``K`` to factorise it (0 normally).
    log_det_k : float
        ``log|K|``.
    solved_q : ndarray of shape (n, p)
        ``K^-1 Q``.
    gram_factor : tuple or None
        Cholesky factor of ``Q^T K^-1 Q`` (None when p = 0).
    log_det_gram : float
        ``log|F^T K^-1 F|`` (0 when p = 0).
    basis_coefficients : ndarray of shape (p,) or (p, m)
        GLS coefficients of each column of ``y`` for the columns of ``Q``.
    weights : ndarray of shape (n,) or (n, m)
        ``a = P y = K^-1 r`` for each column of ``y``.
    """

    factor: tuple
    jitter: float
    log_det_k: float
    solved_q: np.ndarray
    gram_factor: tuple | None
    log_det_gram: float
    basis_coefficients: np.ndarray
    weights: np.ndarray

    @classmethod
    def solve(cls, matrix: np.ndarray, y: np.ndarray, basis: MeanBasis) -> GlsSolution:
        """Factorise ``K`` (lower triangle read) and solve for one (n,) or several (n, m) columns ``y``."""
        factor, jitter = jittered_cholesky(matrix, "covariance matrix of the samples", FIT_CONDITION_ADVICE)
        log_det_k = 2.0 * float(np.sum(np.log(np.diag(factor[0]))))
        solved_y = linalg.cho_solve(factor, y, check_finite=False)
        if not basis.q.shape[1]:
            check_finite_terms(log_det_k, solved_y)
            return cls(factor, jitter, log_det_k, basis.q, None, 0.0, np.zeros((0,) + y.shape[1:]), solved_y)
        solved_q = linalg.cho_solve(factor, basis.q, check_finite=False)
        gram_factor = checked_cholesky(basis.q.T @ solved_q, TREND_WHAT, OVERFLOW_REMEDY)
        beta = linalg.cho_solve(gram_factor, basis.q.T @ solved_y, check_finite=False)
        log_det_gram = 2.0 * float(np.sum(np.log(np.diag(gram_factor[0])))) + basis.log_det_r_squared
        check_finite_terms(log_det_k, log_det_gram, beta, solved_y)
        return cls(factor, jitter, log_det_k, solved_q, gram_factor, log_det_gram, beta, solved_y - solved_q @ beta)

    def precision(self, method: str) -> np.ndarray:
        """Lower triangle of ``W``: ``P = K^-1 - K^-1 Q (Q^T K^-1 Q)^-1 Q^T K^-1`` (REML) or ``K^-1`` (ML)."""
        precision, info = lapack.dpotri(self.factor[0], lower=1)  # lower triangle of K^-1
        if info != 0:
            raise FieldcastError("The covariance matrix could not be inverted. " + FIT_CONDITION_ADVICE)
        if method == "reml" and self.gram_factor is not None:
            half = linalg.solve_triangular(self.gram_factor[0], self.solved_q.T, lower=True, check_finite=False)
            precision -= half.T @ half
        return precision


def likelihood_terms(
    matrix: np.ndarray, y: np.ndarray, basis: MeanBasis, method: str, pairs: np.ndarray | None = None
) -> LikelihoodTerms:
    """Evaluate ``-2 l`` (and what its gradient needs) for a data covariance matrix.

    Parameters
    ----------
    matrix : ndarray of shape (n, n)
        Covariance ``K`` of the observations (nugget included); only its
        lower triangle is read.
    y : ndarray of shape (n,)
        Observations minus any known mean.
    basis : MeanBasis
        Orthonormal basis of the design (p = 0 columns for a known mean).
    method : {"reml", "ml"}
    pairs : ndarray of int, optional
        Flat indices ``i * n + j`` (``i > j``) of the sample pairs at which
        the gradient weights are wanted (see :class:`LikelihoodTerms`).
    """
    solution = GlsSolution.solve(matrix, y, basis)
    n, p = basis.q.shape
    weights = solution.weights
    quadratic = float(y @ weights)
    if method == "reml":
        value = (n - p) * LOG_2PI + solution.log_det_k + solution.log_det_gram + quadratic
    else:
        value = n * LOG_2PI + solution.log_det_k + quadratic
    if pairs is None:
        return LikelihoodTerms(value, weights, solution.basis_coefficients, None, 0.0, None, solution.jitter)
    precision = solution.precision(method)
    residual = precision.take(pairs) - np.outer(weights, weights).take(pairs)
    residual *= 2.0
    return LikelihoodTerms(value, weights, solution.basis_coefficients, residual,
                           float(np.trace(precision) - weights @ weights), precision, solution.jitter)


@dataclass(frozen=True)
class ModelEvaluation:
    """Log-likelihood and GLS mean coefficients of a model on given data."""

    log_likelihood: float
    coefficients: np.ndarray
    jitter: float


def evaluate_model(xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel,
                   method: str = "reml", covariates: np.ndarray | None = None,
                   error_variance: np.ndarray | None = None) -> ModelEvaluation:
    """Log-likelihood and GLS coefficients (for the columns of ``mean.design``) of a model.

    Arguments as for :func:`log_likelihood`, which is this function's log-likelihood.
    """
    if method not in LIKELIHOOD_METHODS:
        raise FieldcastError(f"Unknown likelihood {method!r}; choose one of {', '.join(LIKELIHOOD_METHODS)}.")
    check_samples(xy, values)
    xy = np.asarray(xy, dtype=float)
    values = np.asarray(values, dtype=float)
    if error_variance is not None:
        error_variance = check_error_variance(error_variance, len(values))
    basis = MeanBasis.from_design(mean.design(xy, covariates))
    terms = likelihood_terms(covariance.data_covariance(xy, error_variance), values - mean.known_mean(len(values)),
                             basis, method)
    return ModelEvaluation(-0.5 * terms.minus_two_log_likelihood, basis.coefficients(terms.basis_coefficients),
                           terms.jitter)


def log_likelihood(
    xy: np.ndarray,
    values: np.ndarray,
    covariance: CovarianceModel,
    mean: MeanModel,
    method: str = "reml",
    covariates: np.ndarray | None = None,
    error_variance: np.ndarray | None = None,
) -> float:
    """Exact log-likelihood ``l`` (ML) or restricted log-likelihood ``l_R`` (REML) of a model.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations (CRS units).
    values : ndarray of shape (n,)
        Observations in the modelling scale.
    covariance : CovarianceModel
        Variances in value units squared, ranges in CRS units.
    mean : MeanModel
        Mean model; a known mean is subtracted, other kinds are profiled (ML)
        or integrated out (REML).
    method : {"reml", "ml"}
        See the module docstring for the formulas and the constant convention.
    covariates : ndarray of shape (n, k), optional
        External-drift columns named by ``mean.covariate_names``.
    error_variance : ndarray of shape (n,), optional
        Per-sample measurement-error variances (value units squared), added to the diagonal of ``K`` beside the
        nugget.

    Returns
    -------
    float
        The log-likelihood (natural log, dimensionless). A covariance matrix
        that needed a diagonal jitter issues a ``RuntimeWarning``.
    """
    evaluation = evaluate_model(xy, values, covariance, mean, method, covariates, error_variance)
    if evaluation.jitter:
        warnings.warn(jitter_message(evaluation.jitter), RuntimeWarning, stacklevel=2)
    return evaluation.log_likelihood


class PairedObjective:
    """What likelihood objectives over a :class:`ParameterLayout` share: the sample pairs and the gradient sum.

    The offsets of the distinct sample pairs (one triangle) are computed once
    and reused by every evaluation; the covariance and its derivatives are
    evaluated at those pairs only, which halves the work.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations (any fixed frame; the fitter passes centred, scaled ones).
    y : ndarray of shape (n,) or (n, m)
        Observations minus any known mean (one column per field where a subclass takes several).
    basis : MeanBasis
    method : {"reml", "ml"}
    layout : ParameterLayout
    should_stop : callable, optional
        Checked at every evaluation; True raises :class:`.errors.Cancelled`.
    error_variance : ndarray of shape (n,), optional
        Per-sample measurement-error variances (the units of ``y``, squared), a fixed part of the diagonal of
        ``K`` beside the nugget; their derivative by every parameter is 0.
    """

    def __init__(self, xy: np.ndarray, y: np.ndarray, basis: MeanBasis, method: str, layout: ParameterLayout,
                 should_stop: Callable[[], bool] | None = None, error_variance: np.ndarray | None = None) -> None:
        n = len(y)
        rows, columns = np.tril_indices(n, -1)
        self.rows, self.columns = rows, columns
        self.pairs = rows * n + columns
        self.dx = xy[rows, 0] - xy[columns, 0]
        self.dy = xy[rows, 1] - xy[columns, 1]
        self.y = y
        self.basis = basis
        self.method = method
        self.layout = layout
        self.should_stop = should_stop
        self.error_variance = error_variance
        self.evaluations = 0
        self.jitter = 0.0

    def _check_stop(self) -> None:
        self.evaluations += 1
        if self.should_stop is not None and self.should_stop():
            raise Cancelled("Fitting was cancelled.")

    def _matrix(self, pair_covariance: np.ndarray, diagonal: float) -> np.ndarray:
        """Data covariance with the lower triangle and diagonal (``diagonal`` plus any error variances) filled
        (all the Cholesky factor reads)."""
        n = len(self.y)
        matrix = np.zeros((n, n))
        np.put(matrix, self.pairs, pair_covariance)
        matrix[np.diag_indices(n)] = diagonal if self.error_variance is None else diagonal + self.error_variance
        return matrix

    def gradient(self, model: CovarianceModel, derivatives: list[tuple[int, np.ndarray, float]],
                 terms: LikelihoodTerms) -> np.ndarray:
        """Gradient of ``-2 l`` from the derivatives of :func:`.parameters.covariance_derivatives` at ``model``."""
        gradient = np.zeros(self.layout.n_parameters)
        for index, pair_derivative, diagonal_derivative in derivatives:
            gradient[index] += terms.gradient_term(pair_derivative, diagonal_derivative)
        if self.layout.nugget is None:  # dK/dlog(nugget) = nugget I
            gradient[self.layout.index("log_nugget")] = model.nugget * terms.diagonal_weight
        return gradient


class LikelihoodObjective(PairedObjective):
    """``-2 l`` of one field and its gradient as functions of a parameter vector of a :class:`ParameterLayout`.

    Parameters are those of :class:`PairedObjective`, with ``y`` of shape (n,).
    """

    def __init__(self, xy: np.ndarray, y: np.ndarray, basis: MeanBasis, method: str, layout: ParameterLayout,
                 should_stop: Callable[[], bool] | None = None, error_variance: np.ndarray | None = None) -> None:
        super().__init__(xy, y, basis, method, layout, should_stop, error_variance)
        self._last: tuple[bytes, tuple] | None = None

    def value(self, theta: np.ndarray) -> float:
        """``-2 l`` at ``theta``."""
        return self._value_terms(theta).minus_two_log_likelihood

    def _value_terms(self, theta: np.ndarray) -> LikelihoodTerms:
        self._check_stop()
        model = self.layout.unpack(theta)
        matrix = self._matrix(model.covariance_from_offsets(self.dx, self.dy), model.sill)
        terms = likelihood_terms(matrix, self.y, self.basis, self.method)
        self.jitter = terms.jitter
        return terms

    def best_scale(self, theta: np.ndarray) -> tuple[float, float]:
        """``min over c of -2 l`` with every variance of ``theta`` times ``c``, and that ``log c``.

        Scaling ``K`` by ``c`` changes ``-2 l`` by ``m log c + q / c - q``, with
        ``q = y^T P y`` and ``m = n - p`` (REML) or ``n`` (ML); the minimum is
        at ``c = q / m``. Used to screen starts without fitting the sill.
        """
        terms = self._value_terms(theta)
        m = self.basis.contrasts(self.method)
        q = float(self.y @ terms.weights)
        return terms.minus_two_log_likelihood + m * math.log(q / m) + m - q, math.log(q / m)

    def value_and_gradient(self, theta: np.ndarray) -> tuple[float, np.ndarray]:
        """``-2 l`` and its gradient with respect to ``theta`` at ``theta``."""
        value, gradient, _ = self._evaluate(theta, with_information=False)
        return value, gradient

    def value_gradient_information(self, theta: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
        """``-2 l``, its gradient, and twice the average information at ``theta``.

        The average information (Gilmour, Thompson & Cullis 1995, *Biometrics*
        51, 1440-1450) ``AI_jk = 1/2 a^T D_j W D_k a`` approximates minus the
        Hessian of ``l``; ``2 AI`` approximates the Hessian of ``-2 l`` and
        costs a few matrix-vector products once ``W`` is known.
        """
        return self._evaluate(theta, with_information=True)

    def _evaluate(self, theta: np.ndarray, with_information: bool) -> tuple[float, np.ndarray, np.ndarray | None]:
        key = np.asarray(theta, dtype=float).tobytes()
        if self._last is not None and self._last[0] == key and (self._last[1][2] is not None or not with_information):
            return self._last[1]  # the optimiser often asks again for the point it just had
        result = self._evaluate_anew(theta, with_information)
        self._last = (key, result)
        return result

    def _evaluate_anew(self, theta: np.ndarray, with_information: bool
                       ) -> tuple[float, np.ndarray, np.ndarray | None]:
        self._check_stop()
        model = self.layout.unpack(theta)
        pair_covariance, derivatives = covariance_derivatives(self.layout, model, self.dx, self.dy)
        terms = likelihood_terms(self._matrix(pair_covariance, model.sill), self.y, self.basis, self.method,
                                 self.pairs)
        self.jitter = terms.jitter
        gradient = self.gradient(model, derivatives, terms)
        if not with_information:
            return terms.minus_two_log_likelihood, gradient, None
        a = terms.weights
        a_rows, a_columns = a[self.rows], a[self.columns]
        n = len(a)
        products = np.zeros((n, self.layout.n_parameters))  # column j: D_j a
        for index, pair_derivative, diagonal_derivative in derivatives:
            products[:, index] += (np.bincount(self.rows, pair_derivative * a_columns, n)
                                   + np.bincount(self.columns, pair_derivative * a_rows, n)
                                   + diagonal_derivative * a)
        if self.layout.nugget is None:
            products[:, self.layout.index("log_nugget")] = model.nugget * a
        weighted = blas.dsymm(1.0, terms.precision, products, side=0, lower=1)
        return terms.minus_two_log_likelihood, gradient, products.T @ weighted
