"""The one L-BFGS-B driver of the exact, Vecchia and joint fits.

Every fit minimises ``-2 l`` over log parameters within bounds. The driver clamps
the start into the bounds, divides the objective by ``2 n m`` (``n`` samples, ``m``
fields) so that the tolerances on the log-likelihood ``l`` are the same for every
data size (they are given per sample: ``ftol = tol_l / n``, ``gtol = tol_g / n``),
and the caller reads convergence through :func:`convergence_warning`.
"""
from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np
from scipy import optimize

Bounds = Sequence[tuple[float | None, float | None]]


def clamped(theta: np.ndarray, bounds: Bounds) -> np.ndarray:
    """``theta`` with each entry moved into its ``(low, high)`` bound (None = unbounded on that side)."""
    return np.array([x if low is None else min(max(x, low), high) for x, (low, high) in zip(theta, bounds)])


def minimise(minus_two_log_likelihood: Callable[[np.ndarray], tuple[float, np.ndarray]], start: np.ndarray,
             bounds: Bounds, *, samples: int, log_likelihood_tolerance: float, gradient_tolerance: float,
             max_iterations: int, fields: int = 1,
             callback: Callable[[np.ndarray], None] | None = None) -> optimize.OptimizeResult:
    """L-BFGS-B on ``-2 l / (2 n m)`` from ``start`` clamped into ``bounds``.

    Parameters
    ----------
    minus_two_log_likelihood : callable
        ``theta -> (-2 l, gradient)``.
    start : ndarray
        Starting log parameters.
    bounds : sequence of (low, high)
        Bounds of each parameter (None = no bound).
    samples, fields : int
        ``n`` and ``m`` of the scaling.
    log_likelihood_tolerance, gradient_tolerance : float
        Stop when ``l`` changes by less than the first, or no derivative of ``l`` exceeds the second.
    max_iterations : int
        Iteration limit of the run.
    callback : callable, optional
        Called after each iteration with the current parameters.
    """
    scale = 2.0 * samples * fields

    def scaled(theta: np.ndarray) -> tuple[float, np.ndarray]:
        value, gradient = minus_two_log_likelihood(theta)
        return value / scale, gradient / scale

    options = {"maxiter": max_iterations, "ftol": log_likelihood_tolerance / samples,
               "gtol": gradient_tolerance / samples}
    return optimize.minimize(scaled, clamped(start, bounds), jac=True, method="L-BFGS-B", bounds=bounds,
                             callback=callback, options=options)


def convergence_warning(result: optimize.OptimizeResult) -> str | None:
    """Plain-words warning when a :func:`minimise` run stopped before convergence, else None."""
    if result.success:
        return None
    return (f"The optimiser stopped before convergence after {result.nit} iterations: {result.message}; simplify the "
            "model (ANISOTROPY off, or one KERNEL such as exponential instead of auto), or, fitting in Python, raise "
            "the iteration limit (max_iterations).")
