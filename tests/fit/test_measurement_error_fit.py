"""Measurement error in the fits: the likelihoods with a heteroscedastic diagonal equal a direct computation, their
gradients hold, and a fixed nugget is kept by the exact and the Vecchia fits.

Data: the published Meuse samples (Rikken & Van Rijn 1993). The per-sample error variances are a stated test
diagonal (Meuse publishes none).
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import linalg, stats

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.fit.fit_log import fit_log_lines
from fieldcast.algorithms.fit.fitting import fit_model, fit_with
from fieldcast.algorithms.fit.likelihood import LikelihoodObjective, MeanBasis, log_likelihood
from fieldcast.algorithms.fit.options import FitOptions
from fieldcast.algorithms.fit.shared import fit_shared
from fieldcast.algorithms.fit.vecchia import VecchiaData, VecchiaObjective, VecchiaPlan, vecchia_log_likelihood
from fieldcast.algorithms.fit.vecchia_fit import fit_vecchia
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.parameters import ParameterLayout

MODEL = CovarianceModel((Structure("spherical", 0.5, 900.0, azimuth=40.0, ratio=0.6),), 0.04)


def stated_diagonal(n: int) -> np.ndarray:
    """Error variances 0.01 to 0.09 (log units squared), cycling over the samples."""
    return 0.01 + 0.02 * (np.arange(n) % 5)


@pytest.fixture(scope="module")
def data(meuse):
    return np.asarray(meuse.xy), np.log(meuse.zinc), stated_diagonal(len(meuse.zinc))


@pytest.mark.parametrize("kind", ["constant", "linear"])
def test_reml_with_a_heteroscedastic_diagonal_is_the_density_of_error_contrasts(data, kind):
    # Harville (1974, Biometrika 61, 383-385): for A with orthonormal columns spanning the orthogonal complement of
    # F, log N(A^T y; 0, A^T K A) = l_R + 1/2 log|F^T F| (l_R without Harville's log|F^T F| term, the module's
    # convention), here with K = C + diag(nugget + e). The contrast density is scipy.stats.multivariate_normal.
    xy, values, error_variance = data
    mean = MeanModel.for_data(kind, xy)
    design = mean.design(xy)
    k = MODEL.cross_covariance(xy, xy) + np.diag(MODEL.nugget + error_variance)
    contrasts = linalg.null_space(design.T)
    reference = stats.multivariate_normal(np.zeros(contrasts.shape[1]), contrasts.T @ k @ contrasts).logpdf(
        contrasts.T @ values) - 0.5 * np.linalg.slogdet(design.T @ design)[1]
    value = log_likelihood(xy, values, MODEL, mean, "reml", error_variance=error_variance)
    assert value == pytest.approx(reference, rel=1e-10)
    assert abs(log_likelihood(xy, values, MODEL, mean, "reml") - value) > 1.0  # the diagonal matters


def test_ml_with_a_heteroscedastic_diagonal_is_the_gaussian_density_at_the_gls_mean(data):
    # Gaussian log density (scipy.stats.multivariate_normal) at the GLS trend, K = C + diag(nugget + e).
    xy, values, error_variance = data
    mean = MeanModel.for_data("linear", xy)
    design = mean.design(xy)
    k = MODEL.cross_covariance(xy, xy) + np.diag(MODEL.nugget + error_variance)
    solved = np.linalg.solve(k, design)
    beta = np.linalg.solve(design.T @ solved, solved.T @ values)
    reference = stats.multivariate_normal(design @ beta, k).logpdf(values)
    assert log_likelihood(xy, values, MODEL, mean, "ml", error_variance=error_variance) == pytest.approx(
        reference, rel=1e-10)


def test_vecchia_with_all_previous_samples_is_exact_with_the_diagonal(data):
    # Chain rule of probability (Vecchia 1988, JRSS B 50): m = n - 1 neighbours give the exact likelihood.
    xy, values, error_variance = data
    mean = MeanModel.for_data("constant", xy)
    exact = log_likelihood(xy, values, MODEL, mean, "reml", error_variance=error_variance)
    basis = MeanBasis.from_design(mean.design(xy))
    plan = VecchiaPlan.build(xy, len(values) - 1, MODEL.structures[0])
    approximate = VecchiaData(xy, values, basis, "reml", plan, error_variance).evaluate(MODEL)
    assert -0.5 * approximate.minus_two_log_likelihood == pytest.approx(exact, rel=1e-11)
    assert vecchia_log_likelihood(xy, values, MODEL, mean, neighbours=len(values) - 1) != pytest.approx(exact)


def central_differences(function, theta, step=1e-5):
    return np.array([(function(theta + step * e) - function(theta - step * e)) / (2 * step)
                     for e in np.eye(len(theta))])


@pytest.mark.parametrize("nugget", [None, 0.03])
def test_gradients_match_central_differences_with_the_diagonal_and_a_fixed_nugget(data, nugget):
    # Numerical check of the analytic gradients (exact and Vecchia) in log space, with e on the diagonal and the
    # nugget free or held (then it is no parameter).
    xy, values, error_variance = data
    layout = ParameterLayout("exponential", 1, True, nugget=nugget)
    theta = np.array([{"log_partial_sill_1": math.log(0.5), "log_range_1": math.log(400.0),
                       "log_ratio": math.log(0.6), "azimuth": 0.7, "log_nugget": math.log(0.04)}[name]
                      for name in layout.names])
    mean = MeanModel.for_data("linear", xy)
    basis = MeanBasis.from_design(mean.design(xy))
    exact = LikelihoodObjective(xy, values, basis, "reml", layout, error_variance=error_variance)
    _, gradient = exact.value_and_gradient(theta)
    np.testing.assert_allclose(gradient, central_differences(exact.value, theta), rtol=1e-6, atol=1e-6)
    vecchia = VecchiaObjective(VecchiaData(xy, values, basis, "ml", VecchiaPlan.build(xy, 12), error_variance),
                               layout)
    _, gradient = vecchia.value_and_gradient(theta)
    np.testing.assert_allclose(gradient, central_differences(vecchia.value, theta), rtol=1e-5, atol=1e-5)


@pytest.mark.parametrize("nugget", [0.0, 0.3])
def test_exact_fit_keeps_a_fixed_nugget_and_records_it(meuse, nugget):
    # Meuse log cadmium, with the nugget held where a user's laboratory duplicates would put it: the fit keeps it,
    # and a held nugget cannot raise the maximum of the likelihood.
    xy, values = np.asarray(meuse.xy), np.log(meuse.cadmium)
    free = fit_model(xy, values, kernel="spherical", anisotropy=False)
    fixed = fit_model(xy, values, kernel="spherical", anisotropy=False, nugget=nugget)
    assert fixed.covariance.nugget == nugget
    assert fixed.log_likelihood <= free.log_likelihood + 1e-6
    assert fixed.n_parameters == free.n_parameters - 1
    assert fixed.summary()["fixed_nugget"] == nugget and "fixed_nugget" not in free.summary()
    evaluated = log_likelihood(xy, values, fixed.covariance, fixed.mean)
    assert evaluated == pytest.approx(fixed.log_likelihood, rel=1e-9)


def test_vecchia_fit_keeps_a_fixed_nugget_and_uses_the_error_variances(data):
    xy, values, error_variance = data
    options = FitOptions(kernel="exponential", anisotropy=False, nugget=0.02, likelihood_neighbours=20)
    result = fit_vecchia(xy, values, options, subset_size=80, error_variance=error_variance)
    assert result.covariance.nugget == 0.02
    assert result.summary()["error_variance_field"] == "error variances"
    without = fit_vecchia(xy, values, options, subset_size=80)
    assert without.covariance.field_variance != pytest.approx(result.covariance.field_variance, rel=1e-3)


def test_fit_with_error_variances_keeps_them_out_of_the_model(data):
    # The fitted nugget is the part of the diagonal beyond the stated error variances, so it comes out smaller.
    xy, values, error_variance = data
    free = fit_model(xy, values, kernel="spherical", anisotropy=False)
    result = fit_model(xy, values, kernel="spherical", anisotropy=False, error_variance=error_variance)
    assert result.covariance.nugget < free.covariance.nugget
    assert result.log_likelihood == pytest.approx(
        log_likelihood(xy, values, result.covariance, result.mean, error_variance=error_variance), rel=1e-9)


def test_settings_that_do_not_go_together_are_refused_with_advice(data):
    xy, values, error_variance = data
    with pytest.raises(FieldcastError, match="METHOD reml or ml, or leave NUGGET empty"):
        FitOptions(method="wls", nugget=0.1)
    with pytest.raises(FieldcastError, match="Give a non-negative"):
        FitOptions(nugget=-1.0)
    with pytest.raises(FieldcastError, match="leave ERROR_VARIANCE_FIELD empty"):
        fit_model(xy, values, kernel="spherical", anisotropy=False, method="wls", error_variance=error_variance)


def test_a_shared_fit_refuses_a_fixed_nugget_with_advice(meuse):
    values = np.column_stack([np.log(meuse.zinc), np.log(meuse.copper)])
    with pytest.raises(FieldcastError, match="leave NUGGET empty, or turn off"):
        fit_shared(np.asarray(meuse.xy), values, FitOptions(kernel="spherical", nugget=0.1))


def test_the_fit_log_says_the_nugget_was_held_and_names_the_error_variances(data):
    xy, values, error_variance = data
    options = FitOptions(kernel="spherical", anisotropy=False, nugget=0.02, error_variance_field="lab_var")
    first = fit_log_lines(fit_with(xy, values, options, error_variance=error_variance), "metre")[0]
    assert "nugget 0.02 (held fixed)" in first and "per-sample error variances of lab_var" in first
