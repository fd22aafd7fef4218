"""Tests of the exact REML / ML log-likelihood and its analytic gradient (algorithms/likelihood.py)."""
from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import linalg, optimize, stats
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, Matern, WhiteKernel

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.fit.likelihood import LikelihoodObjective, MeanBasis, evaluate_model, log_likelihood
from fieldcast.algorithms.fit.vecchia import vecchia_log_likelihood
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.parameters import ParameterLayout


def scattered_samples(n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Random locations in a 1000 m square and a smooth signal plus noise (test data only)."""
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0.0, 1000.0, (n, 2))
    values = np.sin(xy[:, 0] / 300.0) + 0.5 * np.cos(xy[:, 1] / 200.0) + 0.3 * rng.normal(size=n)
    return xy, values


def parameter_vector(layout: ParameterLayout) -> np.ndarray:
    """A parameter vector away from every bound."""
    value = {"log_ratio": math.log(0.5), "azimuth": math.radians(35.0), "log_smoothness": math.log(1.3),
             "log_nugget": math.log(0.08), "log_partial_sill_1": math.log(0.6), "log_partial_sill_2": math.log(0.4),
             "log_range_1": math.log(150.0), "log_range_2": math.log(450.0)}
    return np.array([value[name] for name in layout.names])


GRADIENT_CASES = [
    ("reml", ParameterLayout("exponential", 1, True), "linear"),
    ("ml", ParameterLayout("exponential", 1, True), "linear"),
    ("reml", ParameterLayout("spherical", 2, True), "constant"),
    ("ml", ParameterLayout("spherical", 2, True), "quadratic"),
    ("reml", ParameterLayout("gaussian", 2, False), "known"),
    ("ml", ParameterLayout("matern32", 1, True), "constant"),
    ("reml", ParameterLayout("matern", 1, True), "quadratic"),
    ("ml", ParameterLayout("matern", 2, True, smoothness=0.8), "linear"),
]


@pytest.mark.parametrize(("method", "layout", "kind"), GRADIENT_CASES)
def test_gradient_matches_central_differences_of_the_log_likelihood(method, layout, kind):
    # Analytic gradient (Harville 1977, JASA 72, 320-340: dl/dtheta = 1/2 tr((P y y^T P - P) dK/dtheta)
    # for REML; the same with alpha = K^-1 r and K^-1 for ML) against central differences of the
    # public log-likelihood. The Matérn smoothness derivative is itself a difference inside the fitter.
    xy, values = scattered_samples(70, seed=1)
    mean = MeanModel.for_data(kind, xy, known_value=0.2)
    objective = LikelihoodObjective(xy, values - mean.known_mean(len(values)),
                                    MeanBasis.from_design(mean.design(xy)), method, layout)
    theta = parameter_vector(layout)
    value, gradient = objective.value_and_gradient(theta)

    def minus_two_l(t: np.ndarray) -> float:
        return -2.0 * log_likelihood(xy, values, layout.unpack(t), mean, method)

    assert value == pytest.approx(minus_two_l(theta), rel=1e-12)
    step = 1e-5
    differences = np.array([(minus_two_l(theta + step * e) - minus_two_l(theta - step * e)) / (2 * step)
                            for e in np.eye(len(theta))])
    tolerance = 1e-4 if layout.fits_smoothness else 1e-6
    np.testing.assert_allclose(gradient, differences, rtol=tolerance, atol=tolerance * np.abs(gradient).max())


@pytest.mark.parametrize(("layout", "kind"), [(ParameterLayout("matern32", 1, True), "linear"),
                                              (ParameterLayout("exponential", 2, False), "constant")])
def test_gradient_with_covariates(layout, kind):
    # External drift: the same Harville (1977) gradient with a covariate column in F.
    xy, values = scattered_samples(60, seed=2)
    covariate = np.cos(xy[:, 0] / 250.0)[:, None]
    mean = MeanModel.for_data(kind, xy, covariate_names=("c",))
    objective = LikelihoodObjective(xy, values, MeanBasis.from_design(mean.design(xy, covariate)), "reml", layout)
    theta = parameter_vector(layout)
    _, gradient = objective.value_and_gradient(theta)
    step = 1e-5
    differences = np.array([(objective.value(theta + step * e) - objective.value(theta - step * e)) / (2 * step)
                            for e in np.eye(len(theta))])
    np.testing.assert_allclose(gradient, differences, rtol=1e-6, atol=1e-6 * np.abs(gradient).max())


SKLEARN_CASES = [
    # (our structure, equivalent scikit-learn kernel for the field)
    (Structure("matern32", 1.7, 120.0), ConstantKernel(1.7) * Matern(length_scale=120.0, nu=1.5)),
    (Structure("matern52", 0.9, 200.0), ConstantKernel(0.9) * Matern(length_scale=200.0, nu=2.5)),
    (Structure("matern", 1.2, 90.0, smoothness=0.8), ConstantKernel(1.2) * Matern(length_scale=90.0, nu=0.8)),
    # scikit-learn's RBF is exp(-h^2 / (2 l^2)); ours is exp(-(h/a)^2), so a = sqrt(2) l.
    (Structure("gaussian", 1.1, math.sqrt(2.0) * 150.0), ConstantKernel(1.1) * RBF(length_scale=150.0)),
]


@pytest.mark.parametrize(("structure", "field_kernel"), SKLEARN_CASES)
def test_ml_log_likelihood_equals_sklearn_log_marginal_likelihood(structure, field_kernel):
    # Reference: scikit-learn GaussianProcessRegressor.log_marginal_likelihood (Rasmussen & Williams 2006,
    # Algorithm 2.1) for a zero-mean process; ours with a known mean of 0 and ML is the same density.
    xy, values = scattered_samples(90, seed=3)
    centred = values - values.mean()
    nugget = 0.07
    regressor = GaussianProcessRegressor(field_kernel + WhiteKernel(nugget), alpha=0.0, optimizer=None)
    regressor.fit(xy, centred)
    reference = regressor.log_marginal_likelihood_value_
    ours = log_likelihood(xy, centred, CovarianceModel((structure,), nugget), MeanModel("known", 0.0), "ml")
    assert ours == pytest.approx(reference, rel=1e-8)


def test_reml_equals_the_density_of_error_contrasts():
    # Harville (1974, Biometrika 61, 383-385): for A with orthonormal columns spanning the orthogonal
    # complement of F, log N(A^T y; 0, A^T K A) = l_R + 1/2 log|F^T F| with l_R as in our docstring.
    # The contrast density is evaluated with scipy.stats.multivariate_normal.
    xy, values = scattered_samples(50, seed=4)
    mean = MeanModel.for_data("quadratic", xy)
    design = mean.design(xy)
    model = CovarianceModel((Structure("spherical", 0.8, 400.0, 60.0, 0.6),), 0.1)
    contrasts = linalg.null_space(design.T)
    contrast_covariance = contrasts.T @ model.data_covariance(xy) @ contrasts
    contrast_density = stats.multivariate_normal(np.zeros(contrasts.shape[1]), contrast_covariance)
    reference = contrast_density.logpdf(contrasts.T @ values)
    reference -= 0.5 * np.linalg.slogdet(design.T @ design)[1]
    assert log_likelihood(xy, values, model, mean, "reml") == pytest.approx(reference, rel=1e-10)


def test_ml_equals_the_gaussian_density_at_the_gls_mean():
    # ML profile likelihood: log N(y; F beta_GLS, K) (scipy.stats.multivariate_normal as reference),
    # and beta_GLS from the normal equations (F^T K^-1 F) beta = F^T K^-1 y solved with numpy.
    xy, values = scattered_samples(60, seed=5)
    mean = MeanModel.for_data("linear", xy)
    design = mean.design(xy)
    model = CovarianceModel((Structure("exponential", 0.7, 250.0, 120.0, 0.4),), 0.05)
    matrix = model.data_covariance(xy)
    solved = np.linalg.solve(matrix, design)
    beta = np.linalg.solve(design.T @ solved, solved.T @ values)
    evaluation = evaluate_model(xy, values, model, mean, "ml")
    np.testing.assert_allclose(evaluation.coefficients, beta, rtol=1e-9)
    reference = stats.multivariate_normal(design @ beta, matrix).logpdf(values)
    assert evaluation.log_likelihood == pytest.approx(reference, rel=1e-10)


def test_known_mean_reml_is_the_ml_density():
    # With no mean terms (p = 0) REML and ML are the same density N(y - m; 0, K) (scipy reference).
    xy, values = scattered_samples(40, seed=6)
    mean = MeanModel("known", 0.3)
    model = CovarianceModel((Structure("matern52", 1.0, 300.0),), 0.2)
    reference = stats.multivariate_normal(np.full(40, 0.3), model.data_covariance(xy)).logpdf(values)
    assert log_likelihood(xy, values, model, mean, "reml") == pytest.approx(reference, rel=1e-10)
    assert log_likelihood(xy, values, model, mean, "ml") == pytest.approx(reference, rel=1e-10)


def test_coincident_samples_without_nugget_get_jitter_and_a_warning():
    # Two samples at one place and no nugget make K singular: the value must stay finite and the
    # jitter must be reported, never a silent NaN.
    xy, values = scattered_samples(30, seed=7)
    xy = np.vstack([xy, xy[:1]])
    values = np.append(values, values[0] + 0.1)
    model = CovarianceModel((Structure("gaussian", 1.0, 300.0),), 0.0)
    with pytest.warns(RuntimeWarning, match="positive definite"):
        value = log_likelihood(xy, values, model, MeanModel.for_data("constant", xy))
    assert math.isfinite(value)


@pytest.mark.parametrize("likelihood, partial_sill, nugget, words", [
    # K^-1 overflows, so the trend's Gram matrix F^T K^-1 F (G^T D^-1 G for Vecchia) is not finite
    (log_likelihood, 1e-310, 1e-320, "trend's matrix of the likelihood"),
    (vecchia_log_likelihood, 1e-310, 1e-320, "trend's matrix of the likelihood"),
    # a finite trend matrix, but K^-1 y overflows
    (log_likelihood, 1e-300, 1e-310, "could not be evaluated in double precision"),
])
def test_solves_that_overflow_are_refused_with_advice(likelihood, partial_sill, nugget, words):
    # A duplicate location and variances near the smallest double (2.2e-308, IEEE 754) make the solves of
    # both likelihoods overflow; the user is told what to change instead of meeting an internal error.
    xy, values = scattered_samples(30, seed=7)
    xy = np.vstack([xy, xy[:1]])
    values = np.append(values, values[0] + 0.1)
    model = CovarianceModel((Structure("exponential", partial_sill, 300.0),), nugget)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # the jitter warning and numpy's overflow warnings
        with pytest.raises(FieldcastError, match=words) as refusal:
            likelihood(xy, values, model, MeanModel.for_data("constant", xy))
    assert "choose a less smooth KERNEL" in str(refusal.value) and "rescale it" in str(refusal.value)


def test_well_posed_model_gives_no_warning():
    xy, values = scattered_samples(30, seed=8)
    model = CovarianceModel((Structure("exponential", 1.0, 300.0),), 0.1)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        log_likelihood(xy, values, model, MeanModel.for_data("constant", xy))


def test_bad_inputs_raise_clear_errors():
    xy, values = scattered_samples(20, seed=9)
    model = CovarianceModel((Structure("exponential", 1.0, 300.0),), 0.1)
    mean = MeanModel.for_data("constant", xy, covariate_names=("c",))
    with pytest.raises(FieldcastError, match="linearly dependent"):
        log_likelihood(xy, values, model, mean, covariates=np.ones(20))
    with pytest.raises(FieldcastError, match="Unknown likelihood"):
        log_likelihood(xy, values, model, MeanModel(), method="wls")
    with pytest.raises(FieldcastError, match="missing or infinite"):
        log_likelihood(xy, np.where(np.arange(20) == 3, np.nan, values), model, MeanModel())


@pytest.mark.parametrize("method", ["reml", "ml"])
def test_best_scale_is_the_minimum_over_a_common_variance_factor(method):
    # -2 l as a function of a factor c on every variance is m log c + q / c + const; its minimum (found here
    # numerically with scipy.optimize.minimize_scalar) must equal the closed form used to screen starts.
    xy, values = scattered_samples(50, seed=10)
    layout = ParameterLayout("spherical", 1, True)
    mean = MeanModel.for_data("linear", xy)
    objective = LikelihoodObjective(xy, values, MeanBasis.from_design(mean.design(xy)), method, layout)
    theta = parameter_vector(layout)
    variances = np.array([name.startswith(("log_partial_sill", "log_nugget")) for name in layout.names])
    numeric = optimize.minimize_scalar(lambda s: objective.value(theta + s * variances), bounds=(-5, 5),
                                       method="bounded", options={"xatol": 1e-10})
    value, log_scale = objective.best_scale(theta)
    assert value == pytest.approx(numeric.fun, rel=1e-9)
    assert log_scale == pytest.approx(numeric.x, abs=1e-5)


def test_as_many_mean_terms_as_samples_is_refused_with_advice_on_class_covariates():
    # A class covariate with a class of its own at each of 6 samples: the constant and 5 indicators are 6 terms,
    # which leave REML no error contrast (n - p = 0, Harville 1974).
    design = np.column_stack([np.ones(6), np.eye(6)[:, 1:]])
    with pytest.raises(FieldcastError, match="6 terms but there are only 6 samples.*belongs in COVARIATES, not "
                                             "CLASS_COVARIATES"):
        MeanBasis.from_design(design)
