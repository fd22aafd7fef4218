"""Gibbs sampling of censored values from their truncated normal full conditionals.

Under ``Z ~ N(mu, C)`` with precision ``Q = C^-1``, the censored block given the observed values is normal with
precision ``Q_cc`` and mean ``m_c = mu_c - Q_cc^-1 Q_co (z_o - mu_o)``. One coordinate ``i`` of it given the
others is normal with variance ``1 / Q_ii`` and mean ``m_i - sum_{j != i} Q_ij (z_j - m_j) / Q_ii`` (the
conditional of a Gaussian Markov field, e.g. Rue & Held 2005, chapter 2). Restricted to ``z_i < l_i`` it is that
normal truncated above at ``l_i``; a sweep draws every censored coordinate in turn from it, by inverting the
truncated cdf in log space (``log u = log Phi(b) + log U``, ``x = Phi^-1(exp(log u))``), which stays exact far in
the lower tail. The sweeps form a Markov chain whose stationary law is ``N(mu, C)`` truncated to the censoring
region, conditioned on the observed values (the Gibbs sampler of Geweke 1991 for truncated normals).
"""
from __future__ import annotations

import numpy as np
from scipy import linalg, special

from ..errors import FieldcastUsageError
from ..linalg.condition_policy import jittered_cholesky

REMEDY = "Refit the model, or give the samples at one place a larger nugget."


class TruncatedGibbs:
    """Draws of the censored values given the observed ones and ``z_c < l_c``.

    Parameters
    ----------
    values : ndarray of shape (n,)
        Observed values, limits at the censored entries (modelling scale).
    censored : ndarray of bool, shape (n,)
        True where the entry is a limit.
    mean : ndarray of shape (n,)
        Mean vector (the trend at the samples).
    covariance : ndarray of shape (n, n)
        Covariance matrix of the samples (nugget included).
    """

    def __init__(self, values: np.ndarray, censored: np.ndarray, mean: np.ndarray, covariance: np.ndarray) -> None:
        self.values = np.asarray(values, dtype=float)
        self.censored = np.asarray(censored, dtype=bool)
        if self.censored.shape != self.values.shape or not self.censored.any():
            raise FieldcastUsageError("TruncatedGibbs needs a censored mask of the values' shape with one True.")
        factor, _ = jittered_cholesky(np.asarray(covariance, dtype=float), "covariance matrix of the samples",
                                      REMEDY)
        precision = linalg.cho_solve(factor, np.eye(len(self.values)))
        cc = np.ix_(self.censored, self.censored)
        co = np.ix_(self.censored, ~self.censored)
        self.limits = self.values[self.censored]
        self._precision = precision[cc]
        seen_gap = self.values[~self.censored] - np.asarray(mean, dtype=float)[~self.censored]
        shift = linalg.cho_solve(linalg.cho_factor(self._precision, lower=True), precision[co] @ seen_gap)
        self.centre = np.asarray(mean, dtype=float)[self.censored] - shift
        self._sd = 1.0 / np.sqrt(np.diag(self._precision))

    def start(self) -> np.ndarray:
        """A starting point inside the region: each censored value at the lower of its limit and its conditional
        mean, less one conditional standard deviation."""
        return np.minimum(self.limits, self.centre) - self._sd

    def sweep(self, current: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        """One Gibbs sweep over the censored values (a new array; ``current`` is not modified)."""
        z = np.array(current, dtype=float)
        gap = z - self.centre
        diagonal = np.diag(self._precision)
        uniforms = np.log(rng.random(len(z)))
        for i in range(len(z)):
            row = self._precision[i]
            centre_i = self.centre[i] - (row @ gap - diagonal[i] * gap[i]) / diagonal[i]
            upper = (self.limits[i] - centre_i) / self._sd[i]
            draw = centre_i + self._sd[i] * special.ndtri_exp(special.log_ndtr(upper) + uniforms[i])
            z[i] = min(draw, self.limits[i])
            gap[i] = z[i] - self.centre[i]
        return z

    def draws(self, count: int, rng: np.random.Generator, *, burn_in: int = 20, thin: int = 5,
              current: np.ndarray | None = None) -> np.ndarray:
        """``count`` draws of the censored values, shape (count, n_censored): ``burn_in`` sweeps from ``current``
        (or :meth:`start`), then one draw every ``thin`` sweeps."""
        z = self.start() if current is None else np.minimum(np.asarray(current, dtype=float), self.limits)
        for _ in range(burn_in):
            z = self.sweep(z, rng)
        out = np.empty((count, len(z)))
        for k in range(count):
            for _ in range(thin):
                z = self.sweep(z, rng)
            out[k] = z
        return out

    def completed(self, censored_values: np.ndarray) -> np.ndarray:
        """Full data vectors with the censored entries replaced: (n,) for (n_c,), (k, n) for (k, n_c)."""
        draws = np.asarray(censored_values, dtype=float)
        full = np.broadcast_to(self.values, draws.shape[:-1] + self.values.shape).copy()
        full[..., self.censored] = draws
        return full
