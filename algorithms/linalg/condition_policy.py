"""One rule for when a factorised covariance system is refused, accepted with a warning, or accepted.

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

Scope. Kriging (:mod:`..predict.kriging`, :mod:`..predict.local`) follows
this rule. The likelihood (:mod:`..fit.likelihood`) and the sample-point draw
of conditional simulation (:mod:`..simulate.conditioning`) instead add the
smallest diagonal jitter that makes the factorisation succeed: the fitter must
be able to evaluate every candidate parameter set, so they do not refuse.
"""
from __future__ import annotations

import numpy as np
from scipy.linalg import lapack

from .batched import back_substitution, forward_substitution

UNIT_ROUNDOFF = float(np.finfo(float).eps)
"""Relative spacing of double-precision numbers."""

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

