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

Estimates. Every matrix gets the 1-norm estimate of LAPACK ``dpocon`` from
its factor (:func:`reciprocal_condition`; :func:`stack_reciprocal_condition`
for stacks, one call per matrix, about 12 microseconds for k = 40 on the test
machine). The cheaper ``(min_i L_ii / max_i L_ii)^2`` is not used: each
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

UNIT_ROUNDOFF = float(np.finfo(float).eps)
"""Relative spacing of double-precision numbers."""

WARN_RELATIVE_ERROR = 1e-4
"""Relative error of a solve (``cond * u``) above which a usable system draws a warning (common practice)."""

WARN_RECIPROCAL = UNIT_ROUNDOFF / WARN_RELATIVE_ERROR
"""Reciprocal condition below which a system is used with a warning (about 2.2e-12, cond above 4.5e11)."""

CONDITION_ADVICE = ("Refit with a less smooth family such as exponential or Matérn 3/2 (KERNEL in Fit covariance "
                    "model), give the model a nugget (the model file's \"nugget\"), or merge near-duplicate samples.")
"""What the user can change to get a better conditioned system."""


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
    """:func:`reciprocal_condition` of each matrix of a stack (b, k, k) from its factor; 0 where not ``positive``."""
    return np.array([reciprocal_condition(matrix, factor) if ok else 0.0
                     for matrix, factor, ok in zip(matrices, factors, positive)])


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

