"""Closed-form cross-validation checked against brute-force refits and the normal distribution."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from fieldcast.algorithms.errors import Cancelled, FieldcastError
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.crossval import (
    NORMAL_95_QUANTILE,
    CrossValidation,
    candidate_rmse,
    k_fold,
    leave_one_out,
    random_folds,
)
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from reference import MEUSE_LOG_ZINC, gaussian_field

SUBSET = slice(0, 155, 3)  # 52 Meuse samples keep the brute-force refits quick

MEAN_CASES = ["known", "constant", "linear", "constant+dist"]


@pytest.fixture(scope="module")
def data(meuse):
    """Meuse samples of the subset: coordinates, log-zinc, distance to the river."""
    return meuse.xy[SUBSET], np.log(meuse.zinc[SUBSET]), meuse.dist[SUBSET, None]


def model_and_mean(case, xy):
    covariance = CovarianceModel((Structure("matern32", 0.5, 600.0, azimuth=45.0, ratio=0.7),), 0.06)
    names = ("dist",) if case.endswith("+dist") else ()
    return covariance, MeanModel.for_data(case.split("+")[0], xy, names, known_value=5.9)


def brute_force(xy, values, covariates, covariance, mean, fold):
    """Refit the predictor without each fold and predict the fold (nugget included)."""
    predicted = np.empty(len(values))
    variance = np.empty(len(values))
    for number in np.unique(fold):
        out = fold == number
        train_covariates = None if covariates is None else covariates[~out]
        test_covariates = None if covariates is None else covariates[out]
        predictor = KrigingPredictor(xy[~out], values[~out], covariance, mean, train_covariates)
        predicted[out], variance[out] = predictor.predict(xy[out], test_covariates, include_nugget=True)
    return predicted, variance


@pytest.mark.parametrize("case", MEAN_CASES)
def test_leave_one_out_equals_refits(data, case):
    xy, values, dist = data
    covariance, mean = model_and_mean(case, xy)
    covariates = dist if mean.covariate_names else None
    result = leave_one_out(xy, values, covariance, mean, covariates)
    # Dubrule 1983, Math. Geol. 15(6): the closed form equals kriging each sample from all the others
    # (the trend re-estimated without it); checked against those n refits.
    predicted, variance = brute_force(xy, values, covariates, covariance, mean, np.arange(len(values)))
    np.testing.assert_allclose(result.predicted, predicted, rtol=0, atol=1e-10)
    np.testing.assert_allclose(result.variance, variance, rtol=1e-10)
    np.testing.assert_array_equal(result.fold, np.arange(len(values)))
    np.testing.assert_array_equal(result.observed, values)
    np.testing.assert_allclose(result.residual, values - predicted, atol=1e-10)
    np.testing.assert_allclose(result.standardized, (values - predicted) / np.sqrt(variance), rtol=1e-8)


@pytest.mark.parametrize("case", MEAN_CASES)
def test_k_fold_equals_refits(data, case):
    xy, values, dist = data
    covariance, mean = model_and_mean(case, xy)
    covariates = dist if mean.covariate_names else None
    result = k_fold(xy, values, covariance, mean, k=5, seed=11, covariates=covariates)
    # Block form of Dubrule 1983: e_B = (Q_BB)^-1 (Q y)_B equals kriging each fold from the other folds.
    predicted, variance = brute_force(xy, values, covariates, covariance, mean, result.fold)
    np.testing.assert_allclose(result.predicted, predicted, rtol=0, atol=1e-10)
    np.testing.assert_allclose(result.variance, variance, rtol=1e-10)


def test_k_fold_with_one_sample_per_fold_is_leave_one_out(data):
    xy, values, _ = data
    covariance, mean = model_and_mean("linear", xy)
    one_out = leave_one_out(xy, values, covariance, mean)
    folds = k_fold(xy, values, covariance, mean, k=len(values), seed=3)
    np.testing.assert_allclose(folds.predicted, one_out.predicted, rtol=0, atol=1e-12)
    np.testing.assert_allclose(folds.variance, one_out.variance, rtol=1e-12)


def test_random_folds_are_seeded_and_balanced():
    first = random_folds(52, 5, seed=7)
    np.testing.assert_array_equal(first, random_folds(52, 5, seed=7))
    assert not np.array_equal(first, random_folds(52, 5, seed=8))
    counts = np.bincount(first)
    assert len(counts) == 5 and counts.max() - counts.min() <= 1
    with pytest.raises(FieldcastError, match="between 2 and the number of samples"):
        random_folds(52, 1, seed=0)
    with pytest.raises(FieldcastError, match="between 2 and the number of samples"):
        random_folds(52, 53, seed=0)


def test_summary_statistics():
    residual = np.array([0.5, -1.0, 2.5, 0.0])
    variance = np.array([1.0, 4.0, 1.0, 0.25])
    observed = np.array([3.0, 2.0, 1.0, 0.0])
    result = CrossValidation(observed, observed - residual, variance, residual, residual / np.sqrt(variance),
                             np.arange(4))
    summary = result.summary()
    assert summary["ME"] == pytest.approx(0.5)
    assert summary["RMSE"] == pytest.approx(np.sqrt((0.25 + 1.0 + 6.25) / 4))
    assert summary["MSDR"] == pytest.approx((0.25 + 0.25 + 6.25 + 0.0) / 4)
    assert summary["COVERAGE95"] == pytest.approx(0.75)  # only |2.5 / 1| exceeds 1.96
    assert summary["n"] == 4
    # Reference library: scipy.stats.norm, the two-sided 95 % quantile of the standard normal.
    assert NORMAL_95_QUANTILE == pytest.approx(stats.norm.ppf(0.975), rel=1e-12)


def test_standardized_errors_are_standard_normal_under_the_model(meuse):
    # When the data are drawn from the model itself, cross-validation errors divided by their kriging
    # standard deviation are standard normal (definition of the kriging variance; checking MSDR near 1
    # and 95 % coverage is common practice). 300 simulated fields of 40 Meuse locations, fixed seed.
    xy = meuse.xy[::3][:40]
    covariance = CovarianceModel((Structure("exponential", 1.0, 400.0),), 0.2)
    mean = MeanModel.for_data("constant", xy)
    rng = np.random.default_rng(2024)
    standardized = []
    for _ in range(300):
        values = gaussian_field(covariance, xy, rng, mean=3.0)
        standardized.append(leave_one_out(xy, values, covariance, mean).standardized)
    # Tolerance from theory: the errors of one field are correlated, but the 300 fields are independent, so each
    # field's MSDR and coverage are i.i.d. draws and their means over fields are within 4 Monte Carlo standard
    # errors, sd / sqrt(300), of 1 and 0.95 (central limit theorem; Koehler, Brown & Haneuse 2009, Am. Stat. 63,
    # 155-162, on Monte Carlo error); 4 sd is a two-sided 99.994 % normal interval.
    per_field = np.array(standardized)
    msdr = np.mean(per_field**2, axis=1)
    covered = np.mean(np.abs(per_field) <= NORMAL_95_QUANTILE, axis=1)
    for statistic, expected in ((msdr, 1.0), (covered, 0.95)):
        standard_error = statistic.std(ddof=1) / np.sqrt(len(statistic))
        assert abs(statistic.mean() - expected) < 4 * standard_error, (statistic.mean(), standard_error)


def test_cross_validation_refuses_bad_setups(data):
    xy, values, _ = data
    covariance, mean = model_and_mean("quadratic", xy)
    with pytest.raises(FieldcastError, match=r"at least 8 samples; got 7\. Use more samples, or refit the model "
                                             r"with a simpler TREND \(constant\) in 'Fit covariance model'"):
        leave_one_out(xy[:7], values[:7], covariance, MeanModel.for_data("quadratic", xy[:7]))
    with pytest.raises(FieldcastError, match=r"only 6 samples\. Use more samples, or refit"):
        KrigingPredictor(xy[:6], values[:6], covariance, MeanModel.for_data("quadratic", xy[:6]))
    with pytest.raises(FieldcastError, match="number of folds"):
        k_fold(xy, values, covariance, mean, k=0)
    with pytest.raises(FieldcastError, match="cannot estimate the quadratic mean"):
        k_fold(xy[:8], values[:8], covariance, MeanModel.for_data("quadratic", xy[:8]), k=2)


def test_candidate_rmse_equals_brute_force_leave_one_out(meuse):
    # Each candidate's RMSE against kriging each sample from the others with a refactorised system (brute force;
    # Dubrule 1983 shows the closed form equals it), on 40 Meuse samples and two invented candidate models.
    xy, values = meuse.xy[:40], np.log(meuse.zinc[:40])
    candidates = [CovarianceModel((Structure("exponential", 0.6, 400.0),), 0.05),
                  CovarianceModel((Structure("spherical", 0.5, 900.0),), 0.1)]
    mean = MeanModel.for_data("constant", xy)
    steps = []
    found = candidate_rmse(xy, values, candidates, mean, progress=steps.append)
    for covariance, rmse in zip(candidates, found):
        errors = []
        for i in range(len(xy)):
            keep = np.arange(len(xy)) != i
            predicted, _ = KrigingPredictor(xy[keep], values[keep], covariance, mean).predict(xy[i:i + 1])
            errors.append(predicted[0] - values[i])
        assert rmse == pytest.approx(np.sqrt(np.mean(np.square(errors))), rel=1e-9)
    assert steps == [0.5, 1.0]
    with pytest.raises(Cancelled):
        candidate_rmse(xy, values, candidates, mean, should_stop=lambda: True)


def test_attribute_summary_of_a_log_model_in_the_data_units(meuse, data):
    # Meuse zinc in ppm (Rikken & Van Rijn 1993): the observations back-transform to the published values,
    # the predictions to exp(mu) - offset (the lognormal median, Aitchison & Brown 1957); RMSE by its
    # definition sqrt(mean((observed - predicted)^2)) in ppm.
    xy, _, _ = data
    zinc = meuse.zinc[SUBSET]
    transform = Transform("log", 10.0)
    result = leave_one_out(xy, transform.forward(zinc), MEUSE_LOG_ZINC, MeanModel.for_data("constant", xy))
    observed, predicted = result.attribute_values(transform)
    np.testing.assert_allclose(observed, zinc, rtol=1e-12)
    np.testing.assert_allclose(predicted, np.exp(result.predicted) - 10.0, rtol=1e-12)
    summary = result.attribute_summary(transform)
    assert summary["RMSE_ATTRIBUTE"] == pytest.approx(np.sqrt(np.mean((zinc - predicted) ** 2)), rel=1e-12)
    assert summary["ME_ATTRIBUTE"] == pytest.approx(np.mean(zinc - predicted), rel=1e-12)
    # The layer's columns: modelling-scale results, standard error = sqrt(prediction-error variance), then the
    # attribute-unit observed, predicted and error by the same definitions.
    columns = result.sample_columns(transform)
    assert len(columns) == 8 and len(result.sample_columns(Transform())) == 5
    np.testing.assert_allclose(columns[2] ** 2, result.variance, rtol=1e-12)
    np.testing.assert_allclose(columns[5], zinc, rtol=1e-12)
    np.testing.assert_allclose(columns[7], zinc - (np.exp(result.predicted) - 10.0), rtol=1e-9, atol=1e-9)
    # The typical error of a Meuse zinc map is a few hundred ppm (from memory: the values span 113-1839 ppm).
    assert 100.0 < summary["RMSE_ATTRIBUTE"] < 500.0


def test_attribute_summary_without_transform_is_the_summary():
    residual = np.array([0.5, -1.0, 2.5, np.nan])
    observed = np.array([3.0, 2.0, 1.0, 0.0])
    variance = np.array([1.0, 4.0, 1.0, np.nan])
    result = CrossValidation(observed, observed - residual, variance, residual, residual / np.sqrt(variance),
                             np.arange(4))
    summary = result.attribute_summary(Transform())
    assert summary == {"ME_ATTRIBUTE": pytest.approx(result.summary()["ME"]),
                       "RMSE_ATTRIBUTE": pytest.approx(result.summary()["RMSE"])}
