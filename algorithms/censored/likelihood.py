"""The log-likelihood of a Gaussian vector with some values known only to lie below a limit.

For observed values ``z_o`` and censored coordinates ``c`` with limits ``l_c``, under ``Z ~ N(mu, C)``:

``L = f(z_o; mu_o, C_oo) * P(Z_c < l_c | Z_o = z_o)``,

the density of the observed part times the probability of the censoring region under the conditional
normal ``N(mu_c + C_co C_oo^-1 (z_o - mu_o), C_cc - C_co C_oo^-1 C_oc)`` (the usual Tobit-type likelihood of
left-censored Gaussian data). The probability is a univariate normal cdf for one censored value and scipy's
multivariate normal cdf (Genz's quasi-Monte-Carlo integration) for several, so this is for small cases (tests,
a few censored values), not for the fit of large data.
"""
from __future__ import annotations

import numpy as np
from scipy import linalg, stats

from ..errors import FieldcastUsageError


def censored_log_likelihood(values: np.ndarray, censored: np.ndarray, mean: np.ndarray,
                            covariance: np.ndarray) -> float:
    """Log-likelihood of samples whose ``censored`` entries are limits (the true value lies below).

    Parameters
    ----------
    values : ndarray of shape (n,)
        Observed values, and the limits at the censored entries (modelling scale).
    censored : ndarray of bool, shape (n,)
        True where the entry is a limit.
    mean : ndarray of shape (n,)
        Mean vector ``mu``.
    covariance : ndarray of shape (n, n)
        Covariance matrix ``C`` (symmetric positive definite).

    Returns
    -------
    float
        ``log f(z_o) + log P(Z_c < l_c | z_o)`` (natural log).
    """
    values, mean = np.asarray(values, dtype=float), np.asarray(mean, dtype=float)
    censored = np.asarray(censored, dtype=bool)
    covariance = np.asarray(covariance, dtype=float)
    if not (values.shape == mean.shape == censored.shape and covariance.shape == (len(values),) * 2):
        raise FieldcastUsageError("values, censored, mean and covariance must describe the same n samples.")
    seen = ~censored
    gap = values - mean
    log_density = 0.0
    centre, spread = mean[censored], covariance[np.ix_(censored, censored)]
    if seen.any():
        seen_cov = covariance[np.ix_(seen, seen)]
        log_density = float(stats.multivariate_normal(mean[seen], seen_cov).logpdf(values[seen]))
        if censored.any():
            factor = linalg.cho_factor(seen_cov, lower=True)
            cross = covariance[np.ix_(censored, seen)]
            centre = centre + cross @ linalg.cho_solve(factor, gap[seen])
            spread = spread - cross @ linalg.cho_solve(factor, cross.T)
    if not censored.any():
        return log_density
    limits = values[censored]
    if len(limits) == 1:
        return log_density + float(stats.norm.logcdf(limits[0], centre[0], np.sqrt(spread[0, 0])))
    probability = stats.multivariate_normal(centre, spread, allow_singular=False).cdf(limits)
    return log_density + float(np.log(probability))
