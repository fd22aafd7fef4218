"""The one factorisation policy: when a covariance system is refused, used with a warning, or used.

Accuracy. Cholesky factorisation of a symmetric positive definite ``K``
(k x k) is backward stable: the computed factor is exact for ``K + E`` with
``|E| <= c k u |L| |L^T|`` (Higham 2002, *Accuracy and Stability of Numerical
Algorithms*, 2nd ed., theorem 10.3), ``u`` the unit roundoff. A solve with it
therefore has a relative error of about ``cond(K) * u`` (Higham 2002,
section 10.1), where ``cond(K) = 1 / rcond`` is the condition number.

Rule, in terms of the reciprocal condition estimate ``rcond``:

* ``rcond < k * u`` (:func:`refuse_level`): the backward error is as large as
  the smallest eigenvalue, so ``K`` cannot be told apart from a singular
  matrix in double precision; the system is refused.
* ``rcond < u / WARN_RELATIVE_ERROR`` (:data:`WARN_RECIPROCAL`): usable, but
  the kriging weights may carry a relative error above
  :data:`WARN_RELATIVE_ERROR`, which large weights of opposite sign turn into
  predictions far outside the data; the system is used with a warning.
* otherwise the system is accepted silently.

Estimates. Every matrix gets a 1-norm estimate from its factor: LAPACK
``dpocon`` for one matrix (:func:`reciprocal_condition`), and the same
estimator run on a whole stack at once with the stack's triangular solves
(:func:`stack_reciprocal_condition`), which keeps it off the per-system
Python path of local kriging. The cheaper ``(min_i L_ii / max_i L_ii)^2`` is not used: each
``L_ii^2`` lies between the extreme eigenvalues of ``K``, so it only bounds
``rcond`` from above, and on the Meuse samples with a Gaussian model it was
up to a thousand times too optimistic.

Certified floor. A covariance matrix with a nugget (or measurement-error
variances) has a known lower bound on its least eigenvalue, and that alone
bounds ``rcond`` from below (:func:`certified_reciprocal_condition`); where
the bound already clears the warning level, the estimate above could only
say the same, so local kriging skips it there.

Scope. The rule above is for solves whose result is shown to the user:
global and local kriging (:mod:`..predict.kriging`, :mod:`..predict.local`)
and cross-validation (:mod:`..predict.crossval`, through the global factor).
Three other kinds of factorisation follow their own stated rule, for the
reasons given:

* Fits and sample draws (the exact likelihood of :mod:`..fit.likelihood`,
  also used by the joint fit, and the lattice-node covariance of
  :mod:`..simulate.conditioning`) use :func:`jittered_cholesky`: the matrix
  as it is, else the smallest diagonal jitter from :data:`JITTER_START` up to
  :data:`JITTER_LIMIT` of its mean diagonal (steps of ten) that makes it
  factorise, else a :class:`FieldcastError` that says what to change. A fit
  explores parameters: the optimiser's way to the optimum may pass near-singular
  candidates (a long range, a small nugget) that the chosen model is not, and
  refusing them would stop fits that end well-posed. A draw needs the node
  covariance only to well below the Monte Carlo error of its realisations, which
  a jitter of 1e-4 of the variance is. The jitter is a nugget of
  at most 1e-4 of the variance; it is reported (the fit adds it to the model's
  nugget, so predictions use the matrix the likelihood used; simulation says so
  in its warnings). Condition warnings are not given there: the fitted model is
  checked by the kriging rule when it predicts.
* The Vecchia likelihood (:mod:`..fit.vecchia`) factorises its small
  conditioning sets as one stack; a set that is not positive definite raises a
  :class:`FieldcastError` (merge near-duplicate samples, use a nugget), without
  jitter. Within a fit the nugget is at least 1e-6 of the sample variance
  (:data:`..model.parameters.NUGGET_BOUNDS`), which bounds every eigenvalue of a
  set from below, far above the rounding error of a factor of a few dozen rows
  (Higham 2002, theorem 10.3); so a set fails only for a model given from
  outside with a (near) zero nugget and near-duplicate samples, and that model
  is refused rather than changed.
* The trend's Gram matrix of both likelihoods (``F^T K^-1 F``, a few rows) goes
  through :func:`checked_cholesky`: no jitter, a :class:`FieldcastError` when
  the solves before it overflowed (variances near the double-precision limit,
  near-duplicate samples without nugget) and left it non-finite or indefinite.
* Square roots for drawing Gaussian values (:func:`..simulate.circulant.covariance_factor`:
  the Cholesky lattice and the residual of the sample draw) need ``L L^T = K``,
  not a solve, so ill-conditioning does not amplify errors there; a matrix
  that rounding makes indefinite is factorised by its symmetric
  eigendecomposition with rounding-level negative eigenvalues set to zero.

Not a covariance system: the average-information Newton steps of the exact
fit (:mod:`..fit.search`) damp their information matrix by 1e-9 of its trace.
A step there is only a proposal, kept when it lowers ``-2 l``, so its accuracy
never reaches a result.
"""
from __future__ import annotations

import math

import numpy as np
from scipy import linalg
from scipy.linalg import lapack

from ..errors import FieldcastError
from .batched import back_substitution, forward_substitution

UNIT_ROUNDOFF = float(np.finfo(float).eps)
"""Relative spacing of double-precision numbers at 1 (machine epsilon, 2**-52), used as ``u`` in the rule.

It is twice the unit roundoff 2**-53 of Higham 2002 (section 2.1), so both levels lean towards refusing and
warning."""

WARN_RELATIVE_ERROR = 1e-4
"""Relative error of a solve (``cond * u``) above which a usable system draws a warning (common practice)."""

WARN_RECIPROCAL = UNIT_ROUNDOFF / WARN_RELATIVE_ERROR
"""Reciprocal condition below which a system is used with a warning (about 2.2e-12, cond above 4.5e11)."""

CONDITION_ADVICE = ("Refit with a less smooth family such as exponential or Matérn 3/2 (KERNEL in Fit covariance "
                    "model), give the model a nugget (the model file's \"nugget\"), or merge near-duplicate samples.")
"""What the user can change to get a better conditioned system."""

FIT_CONDITION_ADVICE = ("Choose a less smooth KERNEL such as exponential or matern32 in 'Fit covariance model', or "
                        "average or remove samples that lie (nearly) at one place.")
"""What the user can change when the samples' covariance matrix is singular during a fit (the nugget is then
being estimated, so a nugget is not advice the user can follow)."""


JITTER_START = 1e-10
"""First diagonal jitter :func:`jittered_cholesky` tries, as a fraction of the matrix's mean diagonal."""

JITTER_LIMIT = 1e-4
"""Largest jitter :func:`jittered_cholesky` tries (same units) before refusing the matrix."""

ESTIMATE_STEPS = 5
"""Most climbing steps of the stacked 1-norm estimate (LAPACK's estimator also stops at five).
"""


def refuse_level(size: int) -> float:
    """Reciprocal condition below which a (size, size) system is refused: ``size * u``."""
    return size * UNIT_ROUNDOFF


def reciprocal_condition(matrix: np.ndarray, factor: np.ndarray) -> float:
    """1-norm reciprocal condition estimate of a symmetric matrix from its lower Cholesky factor (LAPACK dpocon).

    Returns 0 when LAPACK reports a problem, so the caller refuses the matrix.
    """
    norm = float(np.max(np.sum(np.abs(matrix), axis=0))) if matrix.size else 0.0
    estimate, info = lapack.dpocon(factor, norm, uplo="L")
    return float(estimate) if info == 0 and np.isfinite(estimate) else 0.0


def stack_reciprocal_condition(matrices: np.ndarray, factors: np.ndarray, positive: np.ndarray) -> np.ndarray:
    """1-norm reciprocal condition estimates of a stack (b, k, k) from its lower factors; 0 where not ``positive``.

    The same estimator as LAPACK ``dpocon`` (Hager 1984, *SIAM J. Sci. Stat. Comput.* 5, 311-316; Higham 2002,
    section 15.3): ``||K^-1||_1`` is the largest ``||K^-1 x||_1`` over the unit 1-norm ball, climbed from
    ``x = 1/k`` by steps to the vertex ``e_j`` where ``|K^-1 sign(K^-1 x)|`` is largest, at most
    :data:`ESTIMATE_STEPS` steps. It never exceeds the true norm, so the reciprocal condition is never
    underestimated, and it is run on the whole stack at once with the stack's triangular solves.
    """
    count, size = matrices.shape[:2]
    estimate = np.zeros(count)
    if count == 0 or size == 0:
        return estimate
    safe = np.where(positive[:, None, None], factors, np.eye(size))
    x = np.full((count, size), 1.0 / size)
    inverse_norm = np.zeros(count)
    active = np.arange(count)  # systems still climbing; the others keep their estimate
    for _ in range(ESTIMATE_STEPS):
        factor = safe[active]
        y = back_substitution(factor, forward_substitution(factor, x[active, :, None]))[:, :, 0]
        inverse_norm[active] = np.maximum(inverse_norm[active], np.abs(y).sum(axis=1))
        signs = np.where(y >= 0.0, 1.0, -1.0)[:, :, None]
        z = back_substitution(factor, forward_substitution(factor, signs))[:, :, 0]
        best = np.argmax(np.abs(z), axis=1)
        climbing = np.abs(z[np.arange(len(active)), best]) > np.einsum("bi,bi->b", z, x[active])
        active, best = active[climbing], best[climbing]
        if not len(active):
            break
        x[active] = np.eye(size)[best]
    norm = np.abs(matrices).sum(axis=1).max(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        estimate = 1.0 / (norm * inverse_norm)
    return np.where(positive & np.isfinite(estimate), estimate, 0.0)


ROUNDING_ALLOWANCE = 16.0
"""Rounding error allowed per computed matrix entry, in units of ``u`` times the largest correlation (1): a
conservative allowance for covariances evaluated with a few floating-point operations (common practice)."""


def certified_reciprocal_condition(size: int, least_eigenvalue: float | np.ndarray,
                                   largest_diagonal: float | np.ndarray) -> np.ndarray:
    """A lower bound on the 1-norm reciprocal condition of (size, size) covariance matrices scaled by the sill.

    For a symmetric ``K`` whose exact least eigenvalue is at least ``least_eigenvalue`` (the nugget plus the
    least measurement-error variance, over the sill), whose off-diagonal entries are correlations (``|K_ij| <= 1``)
    and whose diagonal is at most ``largest_diagonal``::

        rcond_1(K) = 1 / (|K|_1 |K^-1|_1) >= (lambda_min - e) / (sqrt(k) (largest_diagonal + k - 1))

    because ``|K^-1|_1 <= sqrt(k) |K^-1|_2 = sqrt(k) / lambda_min`` and ``|K|_1`` is the largest column sum
    (Golub & Van Loan 2013, *Matrix Computations*, 4th ed., section 2.3.2), and the computed matrix's least
    eigenvalue is within ``e = k * ROUNDING_ALLOWANCE * u`` (the 2-norm of the rounding errors, at most ``k``
    times the largest entry's) of the exact one (Weyl's inequality, Golub & Van Loan 2013, theorem 8.1.5).

    Returns
    -------
    ndarray
        The bound; 0 or less where it certifies nothing.
    """
    rounding = size * ROUNDING_ALLOWANCE * UNIT_ROUNDOFF
    return (np.asarray(least_eigenvalue, dtype=float) - rounding) / (
        math.sqrt(size) * (np.asarray(largest_diagonal, dtype=float) + size - 1))


def usable(estimate: np.ndarray | float, size: int) -> np.ndarray | bool:
    """True where a (size, size) system with reciprocal condition ``estimate`` is not refused."""
    return np.asarray(estimate) >= refuse_level(size)


def warning_text(what: str, estimate: float) -> str | None:
    """Warning for a usable system whose reciprocal condition ``estimate`` is below :data:`WARN_RECIPROCAL`.

    Returns None when the system is well enough conditioned.
    """
    if not estimate < WARN_RECIPROCAL:
        return None
    return (f"The {what} is ill-conditioned (condition number about {1.0 / estimate:.1e}; a solve may lose a "
            f"relative {UNIT_ROUNDOFF / estimate:.0e} of accuracy), so predictions can stray far from the data. "
            + CONDITION_ADVICE)



def checked_cholesky(matrix: np.ndarray, what: str, remedy: str) -> tuple[np.ndarray, bool]:
    """Lower Cholesky factor of a symmetric matrix that must factorise as it is (no jitter), else a refusal.

    For the small Gram matrix of the trend in both likelihoods (``F^T K^-1 F`` of the exact one,
    ``G^T D^-1 G`` of the Vecchia one): positive definite whenever the covariance solves before it
    are finite, so a failure means those solves overflowed or lost the trend (variances too small for
    double precision, near-duplicate samples without nugget), and it is refused like a Vecchia
    conditioning set rather than changed.

    Returns
    -------
    tuple
        As from ``scipy.linalg.cho_factor(..., lower=True)``.

    Raises
    ------
    FieldcastError
        If ``matrix`` has an infinite or missing entry, or is not numerically positive definite.
    """
    if np.all(np.isfinite(matrix)):
        try:
            return linalg.cho_factor(matrix, lower=True, check_finite=False)
        except linalg.LinAlgError:
            pass
    raise FieldcastError(f"The {what} could not be factorised in double precision. {remedy}")


def jittered_cholesky(matrix: np.ndarray, what: str, remedy: str) -> tuple[tuple[np.ndarray, bool], float]:
    """Lower Cholesky factor of a symmetric matrix, with the smallest jitter that lets it factorise (fits, draws).

    Tries ``K``, then ``K + j I`` for ``j`` = :data:`JITTER_START` times the mean diagonal of ``K``, ten times
    more at each step, up to :data:`JITTER_LIMIT` times it.

    Parameters
    ----------
    matrix : ndarray of shape (n, n)
        Symmetric; its lower triangle is read.
    what : str
        The matrix in words, for the refusal ("covariance matrix of the samples").
    remedy : str
        What the user can change, appended to the refusal.

    Returns
    -------
    factor : tuple
        As from ``scipy.linalg.cho_factor(..., lower=True)``.
    jitter : float
        Value added to the diagonal (0 when none was needed), in the units of ``matrix``.

    Raises
    ------
    FieldcastError
        If the diagonal is not finite, or ``K`` does not factorise with the largest jitter.
    """
    diagonal = np.diag(matrix)
    if not np.all(np.isfinite(diagonal)):
        raise FieldcastError(f"The {what} has infinite or missing entries; check the model file's nugget, "
                             "partial sills and ranges, or refit it with 'Fit covariance model'.")
    scale = float(np.mean(diagonal)) if diagonal.size else 0.0
    jitter, step = 0.0, JITTER_START * scale
    while True:
        shifted = matrix if jitter == 0.0 else matrix + jitter * np.eye(len(matrix))
        try:
            return linalg.cho_factor(shifted, lower=True, check_finite=False), jitter
        except linalg.LinAlgError:
            if not 0.0 < step <= JITTER_LIMIT * scale:
                raise FieldcastError(f"The {what} is not positive definite even after adding {jitter:.3g} to its "
                                     f"diagonal. {remedy}") from None
            jitter, step = step, step * 10.0
