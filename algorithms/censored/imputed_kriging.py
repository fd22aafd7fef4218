"""Kriging conditioned on the inequalities of censored samples: kriging averaged over completed data sets.

Each completed data set holds the observed values and one joint draw of the censored values below their limits
(:class:`.gibbs.TruncatedGibbs`). Kriging each of the ``m`` sets gives means ``mu_k`` and the one kriging variance
``W`` (it does not depend on the values); the combined prediction is ``mean(mu_k)`` and its variance
``W + (1 + 1/m) B`` with ``B`` the variance of the ``mu_k`` across sets (Rubin's rules, Rubin 1987); exceedance and
quantiles follow from that mean and variance as for any kriging. A conditional simulation conditions each
realisation on one set (``simulate_conditional(value_sets=...)``).
All sets share one factorisation: :class:`..predict.kriging.KrigingPredictor` krigs them as columns.
"""
from __future__ import annotations

from collections.abc import Callable

import numpy as np

from ..model.covariance import CovarianceModel
from ..model.mean import MeanModel
from ..predict.kriging import KrigingPredictor
from .stochastic_em import gibbs_for


def impute_censored(xy: np.ndarray, values: np.ndarray, censored: np.ndarray, covariance: CovarianceModel,
                    mean: MeanModel, coefficients: np.ndarray, covariates: np.ndarray | None = None, *,
                    count: int = 20, seed: int = 1) -> np.ndarray:
    """``count`` completed data sets (shape (count, n)) under a model: observed values kept, censored values
    drawn jointly below their limits given the observed ones and the model's mean ``coefficients``."""
    trend = mean.design(xy, covariates) @ np.asarray(coefficients, dtype=float) + mean.known_mean(len(xy))
    sampler = gibbs_for(xy, values, censored, covariance, trend)
    return sampler.completed(sampler.draws(count, np.random.default_rng(seed), burn_in=50, thin=5))


class ImputedKriging:
    """Kriging averaged over completed data sets (see the module docstring).

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations (CRS units).
    completed : ndarray of shape (m, n)
        Completed data sets, modelling scale (:func:`impute_censored`, or ``CensoredFit.imputations``).
    covariance, mean, covariates
        As for :class:`..predict.kriging.KrigingPredictor`.
    """

    def __init__(self, xy: np.ndarray, completed: np.ndarray, covariance: CovarianceModel, mean: MeanModel,
                 covariates: np.ndarray | None = None) -> None:
        completed = np.atleast_2d(np.asarray(completed, dtype=float))
        self.sets = len(completed)
        self._kriging = KrigingPredictor(xy, completed.T, covariance, mean, covariates)
        self.n, self.xy, self.covariance, self.mean = self._kriging.n, self._kriging.xy, covariance, mean
        self.warnings = self._kriging.warnings
        self.coefficients = self._kriging.coefficients.mean(axis=-1)

    def predict_sets(self, xy0: np.ndarray, covariates0: np.ndarray | None = None, *, include_nugget: bool = False,
                     chunk_size: int = 2048, progress: Callable[[float], None] | None = None,
                     should_stop: Callable[[], bool] | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Kriging means of every set, shape (k, m), and the kriging variance, shape (k,)."""
        return self._kriging.predict(xy0, covariates0, include_nugget=include_nugget, chunk_size=chunk_size,
                                     progress=progress, should_stop=should_stop)

    def predict(self, xy0: np.ndarray, covariates0: np.ndarray | None = None, *, include_nugget: bool = False,
                chunk_size: int = 2048, progress: Callable[[float], None] | None = None,
                should_stop: Callable[[], bool] | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Combined mean and variance at the targets (modelling scale), as ``KrigingPredictor.predict`` returns
        them: ``mean(mu_k)`` and ``W + (1 + 1/m) B``."""
        means, variance = self.predict_sets(xy0, covariates0, include_nugget=include_nugget, chunk_size=chunk_size,
                                            progress=progress, should_stop=should_stop)
        return combine_sets(means, variance)


def combine_sets(means: np.ndarray, variance: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Rubin's rules: the mean over sets (columns of ``means``) and ``variance + (1 + 1/m)`` times their variance."""
    sets = means.shape[1]
    spread = means.var(axis=1, ddof=1) if sets > 1 else np.zeros(len(means))
    return means.mean(axis=1), variance + (1.0 + 1.0 / sets) * spread
