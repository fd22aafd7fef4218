"""Trend coefficients drawn per realisation, for local conditioning around a trend estimated from all samples.

With a mean of estimated terms ``m(x) = f(x)^T beta``, a flat (improper uniform) prior on ``beta`` and the
covariance taken as known, the coefficients given the data are normal about their generalised least squares
estimate (Handcock & Stein 1993, *Technometrics* 35(4), 403-410, on the Bayesian reading of universal
kriging)::

    beta | y ~ N(beta_hat, V_beta),   beta_hat = V_beta F^T K^-1 y,   V_beta = (F^T K^-1 F)^-1

(:func:`..predict.global_trend.estimate_trend`). Realisation ``r`` draws ``beta_r = beta_hat + L z_r``
(``L L^T = V_beta``, ``z_r`` standard normal from the run's seeded generator), conditions the residuals
``y - F beta_r`` by simple kriging, and adds ``f(x)^T beta_r``: given ``beta_r`` the field is a zero-mean
Gaussian field around the trend, so over realisations each cell has the mean
``f0^T beta_hat + lambda^T (y - F beta_hat)`` and the variance of simple kriging plus
``g^T V_beta g`` with ``g = f0 - F^T lambda`` — with every sample as neighbourhood, exactly universal kriging's.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..model.covariance import CovarianceModel
from ..model.mean import MeanModel
from ..predict.global_trend import GlobalTrend, estimate_trend
from .circulant import covariance_factor


@dataclass(frozen=True)
class TrendDraws:
    """Per realisation trend coefficients and the trend they give at the samples.

    Attributes
    ----------
    mean : MeanModel
        The mean model whose terms the coefficients multiply.
    coefficients : ndarray of shape (R, p)
        ``beta_r`` per realisation, in the order of ``mean.term_names``.
    at_samples : ndarray of shape (R, n)
        ``F beta_r``: the trend at the samples (modelling units).
    """

    mean: MeanModel
    coefficients: np.ndarray
    at_samples: np.ndarray

    @classmethod
    def draw(cls, trend: GlobalTrend, xy: np.ndarray, data: np.ndarray, covariance: CovarianceModel,
             mean: MeanModel, covariates: np.ndarray | None, count: int, rng: np.random.Generator,
             error_variance: np.ndarray | None = None) -> TrendDraws:
        """Draw ``count`` coefficient vectors from their distribution given the data (module docstring).

        Parameters
        ----------
        trend : GlobalTrend
            The GLS trend of ``data[0]`` (used as it is for one data set).
        xy : ndarray of shape (n, 2)
            Sample locations (CRS units).
        data : ndarray of shape (m, n)
            The data sets realisations are conditioned on (realisation ``r`` on set ``r mod m``, modelling
            scale); with ``m > 1`` each set gets its own ``beta_hat`` (``V_beta`` does not depend on the data).
        covariance, mean, covariates, error_variance
            As for :func:`..predict.global_trend.estimate_trend`.
        count : int
            Number of realisations ``R``.
        rng : numpy.random.Generator
            Source of the standard normal ``z_r``.
        """
        centres = trend.coefficients.reshape(mean.n_terms, -1)
        if len(data) > 1:
            centres = estimate_trend(xy, data.T, covariance, mean, covariates,
                                     error_variance=error_variance).coefficients.reshape(mean.n_terms, -1)
        factor = covariance_factor(trend.coefficient_covariance)
        coefficients = centres[:, np.arange(count) % centres.shape[1]].T + rng.standard_normal(
            (count, mean.n_terms)) @ factor.T
        return cls(mean, coefficients, coefficients @ mean.design(xy, covariates).T)

    def at_cells(self, xy0: np.ndarray, covariates0: np.ndarray | None) -> np.ndarray:
        """``f(x0)^T beta_r`` (R, b) at cells ``xy0`` (b, 2) with their covariate columns (b, q) or None."""
        return self.coefficients @ self.mean.design(xy0, covariates0).T
