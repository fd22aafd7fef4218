"""Leave-one-out and k-fold cross-validation of a kriging model in closed form.

For a held-out set ``B`` of samples, kriging from the other samples (with
the trend re-estimated from them) leaves the errors and error covariance
below (Dubrule 1983, *Math. Geol.* 15(6), 687-699, who derives them from
the partitioned inverse of the kriging matrix; one-point and block sets
follow from the same argument)::

    e_B = y_B - prediction_B = (Q_BB)^-1 (Q y)_B
    cov(e_B)                 = (Q_BB)^-1

with ``Q = K^-1`` for a known mean (``y`` replaced by ``y - m``) and
``Q = K^-1 - K^-1 F (F^T K^-1 F)^-1 F^T K^-1`` when the mean or trend is
estimated. ``K`` includes the nugget (and any per-sample measurement-error
variances on its diagonal), so the variance is that of the error in
predicting the observation itself. The partitioned-inverse argument holds
for any positive definite ``K``, so the formulas stay exact with a
heteroscedastic diagonal. Leave-one-out is the case of
one-point sets: ``e_i = (Q y)_i / Q_ii`` and ``var_i = 1 / Q_ii``.

For a log model the errors can also be read in attribute units
(:meth:`CrossValidation.attribute_values`, :meth:`CrossValidation.attribute_summary`):
each prediction is back-transformed to the median of its lognormal predictive
distribution, ``exp(mu) - offset`` (see :mod:`..model.transform`), and set
against the observed value.

Local leave-one-out (:func:`local_leave_one_out`) has no such closed form:
each sample is kriged from its nearest other samples by the batched local
systems of :mod:`.local`.
"""
from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from scipy import linalg

from ..errors import Cancelled, FieldcastError
from ..linalg.condition_policy import UNIT_ROUNDOFF
from ..model.covariance import CovarianceModel
from ..model.mean import MeanModel
from ..model.transform import Transform
from .global_trend import GlobalTrend
from .kriging import MORE_SAMPLES_ADVICE, KrigingPredictor, cholesky_factor
from .local import LocalKrigingPredictor

NORMAL_95_QUANTILE = 1.959963984540054
"""Two-sided 95 % quantile of the standard normal distribution."""


@dataclass(frozen=True)
class CrossValidation:
    """Per-sample cross-validation results, all arrays of shape (n,).

    Attributes
    ----------
    observed : ndarray
        Sample values (modelling scale, u).
    predicted : ndarray
        Prediction of each sample from the samples outside its fold (u).
    variance : ndarray
        Prediction-error variance of the observation, nugget included (u2).
    residual : ndarray
        ``observed - predicted`` (u).
    standardized : ndarray
        ``residual / sqrt(variance)`` (dimensionless; ideally standard normal).
    fold : ndarray of int
        Fold number of each sample (its own index for leave-one-out).
    """

    observed: np.ndarray
    predicted: np.ndarray
    variance: np.ndarray
    residual: np.ndarray
    standardized: np.ndarray
    fold: np.ndarray

    @property
    def resolved_rows(self) -> np.ndarray:
        """Boolean mask (n,) of the samples that got a prediction (finite prediction and variance).

        Local leave-one-out leaves NaN for samples with too few neighbours; the
        global schemes resolve every sample.
        """
        return np.isfinite(self.predicted) & np.isfinite(self.variance)

    def resolved(self) -> CrossValidation:
        """The results of the samples of :attr:`resolved_rows` only, in their order."""
        rows = self.resolved_rows
        return CrossValidation(**{name: getattr(self, name)[rows] for name in
                                  ("observed", "predicted", "variance", "residual", "standardized", "fold")})

    def summary(self) -> dict:
        """Summary statistics over the resolved samples (see :meth:`resolved`), as plain floats.

        ``ME`` mean residual (u), ``RMSE`` root mean squared residual (u),
        ``MSDR`` mean squared standardised residual (about 1 when the
        variances are right), ``COVERAGE95`` share of samples with
        ``|standardized| <= 1.959964`` (about 0.95 under normal errors), ``n``
        the number of resolved samples they are computed from (NaN
        statistics when it is 0).
        """
        rows = self.resolved()
        if not len(rows.residual):
            return {"ME": math.nan, "RMSE": math.nan, "MSDR": math.nan, "COVERAGE95": math.nan, "n": 0}
        return {
            "ME": float(np.mean(rows.residual)),
            "RMSE": float(np.sqrt(np.mean(rows.residual**2))),
            "MSDR": float(np.mean(rows.standardized**2)),
            "COVERAGE95": float(np.mean(np.abs(rows.standardized) <= NORMAL_95_QUANTILE)),
            "n": len(rows.residual),
        }

    def attribute_values(self, transform: Transform) -> tuple[np.ndarray, np.ndarray]:
        """Observed values and predictions (n,) in attribute units.

        Both go through :meth:`..model.transform.Transform.back_median`: for a log model the
        prediction becomes ``exp(mu) - offset``, the median of its lognormal predictive distribution,
        and the observation its value again (for samples merged at one place, the geometric mean
        of their values plus offset, minus the offset); without a transform both are unchanged.
        """
        return transform.back_median(self.observed), transform.back_median(self.predicted)

    def sample_columns(self, transform: Transform) -> list[np.ndarray]:
        """The per-sample columns of the cross-validation layer, each (n,), in this order.

        Observed, predicted, standard error ``sqrt(variance)``, residual and standardized residual (modelling
        scale); for a transformed model also observed, predicted and ``observed - predicted`` in attribute units
        (:meth:`attribute_values`).
        """
        columns = [self.observed, self.predicted, np.sqrt(self.variance), self.residual, self.standardized]
        if transform.kind != "none":
            observed, predicted = self.attribute_values(transform)
            columns += [observed, predicted, observed - predicted]
        return columns

    def attribute_summary(self, transform: Transform) -> dict:
        """``ME_ATTRIBUTE`` and ``RMSE_ATTRIBUTE``: mean and root mean squared ``observed - predicted`` in
        attribute units (:meth:`attribute_values`) over the resolved samples; NaN when none is resolved.

        For a log model the median back-transform is not unbiased, so ``ME_ATTRIBUTE`` is typically
        positive even for a sound model (the lognormal mean exceeds its median).
        """
        observed, predicted = self.resolved().attribute_values(transform)
        if not len(observed):
            return {"ME_ATTRIBUTE": math.nan, "RMSE_ATTRIBUTE": math.nan}
        error = observed - predicted
        return {"ME_ATTRIBUTE": float(np.mean(error)), "RMSE_ATTRIBUTE": float(np.sqrt(np.mean(error**2)))}


def _result(values: np.ndarray, residual: np.ndarray, variance: np.ndarray,
            fold: np.ndarray) -> CrossValidation:
    """Assemble a :class:`CrossValidation` from observations, errors and error variances."""
    observed = np.array(values, dtype=float)
    return CrossValidation(observed=observed, predicted=observed - residual, variance=variance,
                           residual=residual, standardized=residual / np.sqrt(variance), fold=fold)


def leave_one_out(xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel,
                  covariates: np.ndarray | None = None, error_variance: np.ndarray | None = None) -> CrossValidation:
    """Leave-one-out cross-validation in closed form (Dubrule 1983).

    Each sample is predicted by kriging from all the others with the same
    covariance model, the trend coefficients re-estimated without it.
    Needs more samples than the mean model has terms plus one.
    ``error_variance`` (n,) are per-sample measurement-error variances (u2, on the diagonal of ``K``).
    """
    predictor = KrigingPredictor(xy, values, covariance, mean, covariates, error_variance)
    if predictor.n <= mean.n_terms + 1:
        raise FieldcastError(
            f"Leave-one-out with a {mean.kind} mean needs at least {mean.n_terms + 2} samples; "
            f"got {predictor.n}. {MORE_SAMPLES_ADVICE}"
        )
    precision, precision_values = predictor.projected_precision()
    diagonal = np.diag(precision).copy()
    if not diagonal.min() > len(diagonal) * UNIT_ROUNDOFF * diagonal.max():
        raise FieldcastError(
            f"Leaving out sample {int(np.argmin(diagonal))} leaves the {mean.kind} mean impossible to "
            "estimate from the others; refit the model with a simpler TREND."
        )
    return _result(values, precision_values / diagonal, 1.0 / diagonal, np.arange(predictor.n))


def local_leave_one_out(xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel, *,
                        neighbours: int, search_radius: float | None = None, covariates: np.ndarray | None = None,
                        error_variance: np.ndarray | None = None, progress: Callable[[float], None] | None = None,
                        should_stop: Callable[[], bool] | None = None, trend: GlobalTrend | None = None,
                        sectors: int = 1) -> CrossValidation:
    """Leave-one-out cross-validation with local kriging from each sample's nearest other samples.

    Each sample is predicted as by :class:`.neighbourhood.LocalKrigingPredictor`
    (same arguments) from its ``neighbours`` nearest other samples within
    ``search_radius``, the trend re-estimated from them (or, given ``trend`` and ``sectors``, the residuals of
    that global trend kriged from neighbours spread over sectors); the variance is that
    of the error in predicting the observation (nugget included), as for
    :func:`leave_one_out`. With ``neighbours >= n - 1`` this is global
    leave-one-out. Samples with fewer than ``mean.n_terms + 1`` other samples
    in range (or a singular local system) get NaN prediction, residual and
    variance; :meth:`CrossValidation.summary` leaves them out and
    :meth:`CrossValidation.resolved` drops them.

    Raises
    ------
    FieldcastError
        For fewer than ``mean.n_terms + 2`` samples, or the arguments refused by
        :class:`.neighbourhood.LocalKrigingPredictor`.
    """
    predictor = LocalKrigingPredictor(xy, values, covariance, mean, neighbours=neighbours,
                                      search_radius=search_radius, covariates=covariates,
                                      error_variance=error_variance, trend=trend, sectors=sectors)
    if predictor.n <= predictor.minimum_neighbours:
        raise FieldcastError(
            f"Leave-one-out with a {mean.kind} mean needs at least {predictor.minimum_neighbours + 1} samples; "
            f"got {predictor.n}. {MORE_SAMPLES_ADVICE}"
        )
    predicted, variance = predictor.leave_one_out(progress=progress, should_stop=should_stop)
    return _result(values, np.asarray(values, dtype=float) - predicted, variance, np.arange(predictor.n))


def random_folds(n: int, k: int, seed: int) -> np.ndarray:
    """Fold number (0..k-1) for each of ``n`` samples: a seeded shuffle dealt out in turn.

    Fold sizes differ by at most one; the same ``seed`` gives the same folds.
    """
    if not 2 <= k <= n:
        raise FieldcastError(
            f"The number of folds must be between 2 and the number of samples ({n}); got {k}."
        )
    order = np.random.default_rng(seed).permutation(n)
    fold = np.empty(n, dtype=int)
    fold[order] = np.arange(n) % k
    return fold


def k_fold(xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel, *, k: int = 10,
           seed: int = 0, covariates: np.ndarray | None = None) -> CrossValidation:
    """K-fold cross-validation in closed form over seeded random folds.

    Every fold is predicted by kriging from the samples in the other folds
    (trend re-estimated from them): ``e_B = (Q_BB)^-1 (Q y)_B`` and the
    per-sample variance is the diagonal of ``(Q_BB)^-1``.
    """
    predictor = KrigingPredictor(xy, values, covariance, mean, covariates)
    fold = random_folds(predictor.n, int(k), seed)
    precision, precision_values = predictor.projected_precision()
    residual = np.empty(predictor.n)
    variance = np.empty(predictor.n)
    for number in range(int(k)):
        members = np.flatnonzero(fold == number)
        factor = (cholesky_factor(
            precision[np.ix_(members, members)], f"precision matrix of fold {number}",
            f"The samples outside this fold cannot estimate the {mean.kind} mean; use more folds or refit the "
            "model with a simpler TREND."), True)
        residual[members] = linalg.cho_solve(factor, precision_values[members], check_finite=False)
        variance[members] = np.diag(linalg.cho_solve(factor, np.eye(len(members)), check_finite=False))
    return _result(values, residual, variance, fold)


def candidate_rmse(xy: np.ndarray, values: np.ndarray, candidates: Sequence[CovarianceModel], mean: MeanModel, *,
                   covariates: np.ndarray | None = None, progress: Callable[[float], None] | None = None,
                   should_stop: Callable[[], bool] | None = None,
                   error_variance: np.ndarray | None = None) -> list[float]:
    """Leave-one-out RMSE (modelling units) of each candidate covariance model under the same mean kind.

    Used by the fit report to set the candidates' AIC beside how well each predicts held-out samples.
    ``covariates`` are the mean model's covariate columns at the samples, when it names any; ``error_variance``
    the samples' measurement-error variances, when the fit used them.

    Raises
    ------
    Cancelled
        When ``should_stop()`` turns True (asked before each candidate).
    """
    rmse = []
    for index, covariance in enumerate(candidates):
        if should_stop is not None and should_stop():
            raise Cancelled("Cancelled while cross-validating the candidate models.")
        rmse.append(leave_one_out(xy, values, covariance, mean, covariates, error_variance).summary()["RMSE"])
        if progress is not None:
            progress((index + 1) / len(candidates))
    return rmse
