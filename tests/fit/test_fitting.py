"""Tests of covariance-model fitting (algorithms/fitting.py, fit_search.py, fit_warnings.py)."""
from __future__ import annotations

import json
import math
import re
from pathlib import Path

import numpy as np
import pytest
from scipy import optimize, stats
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, Matern, WhiteKernel

from fieldcast.algorithms.errors import Cancelled, FieldcastError
from fieldcast.algorithms.fit import search as fit_search
from fieldcast.algorithms.fit.bound_warnings import bound_warnings
from fieldcast.algorithms.fit.fitting import fit_model
from fieldcast.algorithms.fit.likelihood import log_likelihood
from fieldcast.algorithms.fit.options import AUTO_FAMILIES, FIT_METHODS, KERNEL_CHOICES, FitOptions
from fieldcast.algorithms.fit.variogram_fit import fit_wls
from fieldcast.algorithms.model.correlation import FAMILIES
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.parameters import (
    DataScales,
    ParameterLayout,
    parameter_bounds,
)
from reference import gaussian_field


def simulate(model: CovarianceModel, n: int, seed: int, side: float = 1000.0,
             mean: float = 5.0) -> tuple[np.ndarray, np.ndarray]:
    """Gaussian field with covariance ``model`` at ``n`` uniform random points (Cholesky of K)."""
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0.0, side, (n, 2))
    return xy, gaussian_field(model, xy, rng, mean)


README = Path(__file__).resolve().parents[2] / "README.md"

ANISOTROPIC = CovarianceModel((Structure("exponential", 1.0, 250.0, 30.0, 0.4),), 0.1)
ISOTROPIC = CovarianceModel((Structure("matern32", 1.0, 150.0),), 0.1)


def documented_choices(parameter: str) -> tuple[str, ...]:
    """The words the README's parameter table gives for a choice parameter (before any ";" remark)."""
    row = next(line for line in README.read_text(encoding="utf-8").splitlines()
               if line.startswith(f"| `{parameter}` |"))
    return tuple(re.findall(r"`([^`]+)`", row.split("|")[2].split(";")[0]))


def test_choices_are_those_documented_for_users():
    # The user-facing contract is the README's parameter table: the engine's choices must be exactly its words,
    # in its order, and every kernel but "auto" a correlation family of the engine.
    assert FIT_METHODS == documented_choices("METHOD")
    assert KERNEL_CHOICES == documented_choices("KERNEL")
    assert set(KERNEL_CHOICES) - {"auto"} <= set(FAMILIES) and set(AUTO_FAMILIES) < set(KERNEL_CHOICES)


def reml_standard_errors(model_of, theta: np.ndarray, xy: np.ndarray, steps: np.ndarray) -> np.ndarray:
    """Asymptotic standard errors of REML estimates of ``theta`` for a constant-mean field at ``xy``.

    The inverse of the expected REML information ``I_ij = tr(P K_i P K_j) / 2``, with
    ``P = K^-1 - K^-1 X (X^T K^-1 X)^-1 X^T K^-1`` and ``K_i = dK / dtheta_i`` (Harville 1977, JASA 72, 320-340,
    section 6; the REML estimator is asymptotically normal with this covariance, Cressie & Lahiri 1993, J.
    Multivariate Anal. 45, 217-233). ``K_i`` by central differences of ``model_of(theta).data_covariance``.
    """
    covariance = model_of(theta).data_covariance(xy)
    inverse = np.linalg.inv(covariance)
    projected = inverse @ np.ones((len(xy), 1))
    p_matrix = inverse - projected @ projected.T / projected.sum()
    products = []
    for i, step in enumerate(steps):
        offset = np.zeros_like(theta)
        offset[i] = step
        derivative = (model_of(theta + offset).data_covariance(xy) - model_of(theta - offset).data_covariance(xy))
        products.append(p_matrix @ derivative / (2.0 * step))
    information = np.array([[0.5 * np.sum(a * b.T) for b in products] for a in products])
    return np.sqrt(np.diag(np.linalg.inv(information)))


def test_reml_recovers_anisotropy_and_range():
    # Tolerance from theory: each estimate lies within 3 asymptotic standard errors of the truth (REML information,
    # see reml_standard_errors; 3 sd is a two-sided 99.7 % normal interval). For this design the standard errors are
    # about 0.36 in log(range), 5.3 degrees of azimuth and 0.077 in ratio.
    xy, values = simulate(ANISOTROPIC, 300, seed=0)
    true = ANISOTROPIC.structures[0]

    def model_of(theta: np.ndarray) -> CovarianceModel:
        log_range, azimuth, ratio, partial_sill, nugget = theta
        return CovarianceModel((Structure("exponential", partial_sill, math.exp(log_range), azimuth, ratio),), nugget)

    theta = np.array([math.log(true.range), true.azimuth, true.ratio, true.partial_sill, ANISOTROPIC.nugget])
    errors = reml_standard_errors(model_of, theta, xy, np.array([1e-5, 1e-4, 1e-6, 1e-6, 1e-6]))
    result = fit_model(xy, values, kernel="exponential")
    structure = result.covariance.structures[0]
    azimuth_error = (structure.azimuth - true.azimuth + 90.0) % 180.0 - 90.0
    assert abs(math.log(structure.range / true.range)) <= 3 * errors[0]
    assert abs(azimuth_error) <= 3 * errors[1]
    assert abs(structure.ratio - true.ratio) <= 3 * errors[2]
    assert result.warnings == []


def test_auto_keeps_the_lowest_aic_and_lists_every_candidate():
    xy, values = simulate(ANISOTROPIC, 120, seed=1)
    result = fit_model(xy, values)
    listed = {(c.family, c.anisotropy) for c in result.candidates}
    assert listed == {(f, a) for f in AUTO_FAMILIES for a in (False, True)}
    best = min(result.candidates, key=lambda c: c.aic)
    assert result.aic == best.aic
    assert result.covariance == best.covariance
    for candidate in result.candidates:
        # AIC = -2 l + 2 k (Akaike 1974); BIC = -2 l + k log(n - p) for REML (see fitting.py).
        k = (candidate.aic + 2 * candidate.log_likelihood) / 2
        assert k == pytest.approx(5 if candidate.anisotropy else 3)
        assert candidate.bic == pytest.approx(-2 * candidate.log_likelihood + k * math.log(120 - 1))


@pytest.mark.parametrize(("family", "reference_kernel"), [
    ("matern32", Matern(length_scale=100.0, nu=1.5)),
    # scikit-learn's RBF is exp(-d^2 / (2 l^2)); our gaussian exp(-(d/a)^2) is the same with a = sqrt(2) l,
    # a rescaling of the range that leaves the maximised likelihood unchanged.
    ("gaussian", RBF(length_scale=100.0)),
])
def test_ml_optimum_is_at_least_sklearns_optimum(family, reference_kernel):
    # Reference: scikit-learn GaussianProcessRegressor maximising the log marginal likelihood (zero mean,
    # isotropic Matern(nu=1.5) or RBF, times a constant, plus white noise, 5 restarts); ours: the same
    # family, known mean 0, ML.
    xy, values = simulate(CovarianceModel((Structure(family, 1.0, 150.0),), 0.1), 120, seed=2)
    centred = values - values.mean()
    kernel = ConstantKernel(1.0) * reference_kernel + WhiteKernel(0.1)
    regressor = GaussianProcessRegressor(kernel, alpha=0.0, n_restarts_optimizer=5, random_state=0)
    regressor.fit(xy, centred)
    result = fit_model(xy, centred, kernel=family, anisotropy=False, mean="known", known_mean=0.0,
                       method="ml")
    assert result.log_likelihood >= regressor.log_marginal_likelihood_value_ - 1e-6
    if family == "gaussian":
        # Same model at the reference's optimum (a = sqrt(2) l): our likelihood equals scikit-learn's.
        fitted = regressor.kernel_
        reference = CovarianceModel((Structure("gaussian", fitted.k1.k1.constant_value,
                                               math.sqrt(2.0) * fitted.k1.k2.length_scale),),
                                    fitted.k2.noise_level)
        direct = log_likelihood(xy, centred, reference, MeanModel.for_data("known", xy), "ml")
        assert direct == pytest.approx(regressor.log_marginal_likelihood_value_, rel=1e-8, abs=1e-6)


@pytest.mark.parametrize(("method", "kind"), [("reml", "linear"), ("ml", "constant"), ("reml", "known")])
def test_reported_log_likelihood_is_that_of_the_reported_model(method, kind):
    # The internal standardisation must not change the reported value: re-evaluate in data units.
    xy, values = simulate(ISOTROPIC, 80, seed=3, mean=1000.0)
    values = 250.0 * values
    result = fit_model(xy + [181000.0, 333000.0], values, kernel="matern32", anisotropy=True, mean=kind,
                       method=method, known_mean=250_000.0)
    direct = log_likelihood(xy + [181000.0, 333000.0], values, result.covariance, result.mean, method)
    assert result.log_likelihood == pytest.approx(direct, rel=1e-10, abs=1e-8)
    assert result.n_parameters == 5 + (result.mean.n_terms if method == "ml" else 0)


def test_units_follow_the_data():
    # Variances scale with the square of the value unit; ranges with the coordinate unit.
    xy, values = simulate(ISOTROPIC, 80, seed=4)
    base = fit_model(xy, values, kernel="matern32", anisotropy=False)
    scaled = fit_model(10.0 * xy, 100.0 * values, kernel="matern32", anisotropy=False)
    assert scaled.covariance.structures[0].range == pytest.approx(10.0 * base.covariance.structures[0].range,
                                                                  rel=1e-4)
    assert scaled.covariance.sill == pytest.approx(1e4 * base.covariance.sill, rel=1e-4)
    assert scaled.covariance.nugget == pytest.approx(1e4 * base.covariance.nugget, rel=1e-3)


def test_covariates_enter_the_mean():
    xy, values = simulate(ISOTROPIC, 100, seed=5)
    covariate = xy[:, 0] / 1000.0
    result = fit_model(xy, values + 3.0 * covariate, kernel="matern32", anisotropy=False, covariates=covariate)
    assert result.mean.term_names == ("1", "covariate_1")
    # GLS with the true covariance K has var(beta) = (X^T K^-1 X)^-1 (Aitken 1935; Cressie 1993, 3.4); with a fitted
    # K the estimate stays within 3 of those standard errors of the truth.
    design = np.column_stack([np.ones(len(xy)), covariate])
    information = design.T @ np.linalg.solve(ISOTROPIC.data_covariance(xy), design)
    assert abs(result.coefficients[1] - 3.0) <= 3 * math.sqrt(np.linalg.inv(information)[1, 1])
    direct = log_likelihood(xy, values + 3.0 * covariate, result.covariance, result.mean, "reml", covariate)
    assert result.log_likelihood == pytest.approx(direct, rel=1e-10)


def test_nested_fit_finds_the_short_and_the_long_structure():
    # Simulation study (invented data from a known model): 300 samples, spacing about 58 m, a short spherical
    # structure of 150 m and a long one of 800 m. The nested fit must find both scales (a single structure cannot
    # hold both), each within 3 asymptotic standard errors of the truth in log(range) (REML information, see
    # reml_standard_errors: about 0.10 for the short and 0.21 for the long range).
    nested_truth = CovarianceModel((Structure("spherical", 0.5, 150.0), Structure("spherical", 1.0, 800.0)), 0.02)
    xy, values = simulate(nested_truth, 300, seed=6)

    def model_of(theta: np.ndarray) -> CovarianceModel:
        log_short, log_long, short_sill, long_sill, nugget = theta
        return CovarianceModel((Structure("spherical", short_sill, math.exp(log_short)),
                                Structure("spherical", long_sill, math.exp(log_long))), nugget)

    theta = np.array([math.log(150.0), math.log(800.0), 0.5, 1.0, 0.02])
    errors = reml_standard_errors(model_of, theta, xy, np.array([1e-5, 1e-5, 1e-6, 1e-6, 1e-7]))
    single = fit_model(xy, values, kernel="spherical", anisotropy=False)
    nested = fit_model(xy, values, kernel="spherical", anisotropy=False, nested=True)
    short, long = nested.covariance.structures
    assert abs(math.log(short.range / 150.0)) <= 3 * errors[0]
    assert abs(math.log(long.range / 800.0)) <= 3 * errors[1]
    assert nested.n_parameters == 5
    # Two structures contain the single one as a special case, so the optimum cannot be worse.
    assert nested.log_likelihood >= single.log_likelihood - 1e-3


def test_matern_smoothness_is_fitted_or_kept():
    xy, values = simulate(ISOTROPIC, 80, seed=7)
    fitted = fit_model(xy, values, kernel="matern", anisotropy=False)
    assert fitted.n_parameters == 4
    fixed = fit_model(xy, values, kernel="matern", anisotropy=False, smoothness=1.5)
    assert fixed.covariance.structures[0].smoothness == 1.5
    assert fixed.n_parameters == 3
    # nu = 1.5 is the matern32 family (Rasmussen & Williams 2006, eq. 4.17): same optimum.
    matern32 = fit_model(xy, values, kernel="matern32", anisotropy=False)
    assert fixed.log_likelihood == pytest.approx(matern32.log_likelihood, abs=1e-5)
    assert fitted.log_likelihood >= fixed.log_likelihood - 1e-5
    # The data are Matérn nu = 3/2: fixing nu at the truth loses little likelihood. Likelihood-ratio statistic
    # below the chi-square (1 degree of freedom) 95 % quantile (Wilks 1938, Ann. Math. Statist. 9, 60-62).
    assert 2.0 * (fitted.log_likelihood - fixed.log_likelihood) < stats.chi2.ppf(0.95, 1)


def test_wls_delegates_to_the_variogram_fit_and_scores_by_reml():
    xy, values = simulate(ANISOTROPIC, 150, seed=8)
    result = fit_model(xy, values, kernel="spherical", method="wls", mean="linear")
    mean = result.mean
    design = mean.design(xy)
    residual = values - design @ np.linalg.lstsq(design, values, rcond=None)[0]
    # The fit bounds sill and range as the likelihood fits do, from the data's spacing, diameter and variance.
    scales = DataScales(fit_search.smallest_spacing(xy), fit_search.diameter(xy), float(np.mean(residual ** 2)))
    direct = fit_wls(xy, residual, "spherical", anisotropy=True, scales=scales)
    ours, theirs = result.covariance.structures[0], direct.structures[0]
    assert ours.family == theirs.family
    assert result.covariance.nugget == pytest.approx(direct.nugget, rel=1e-8)
    for name in ("partial_sill", "range", "azimuth", "ratio"):
        assert getattr(ours, name) == pytest.approx(getattr(theirs, name), rel=1e-8)
    assert result.log_likelihood == pytest.approx(log_likelihood(xy, values, result.covariance, mean, "reml"))
    assert result.summary()["likelihood_method"] == "reml"


def test_a_range_on_its_upper_bound_is_reported():
    # A strong linear trend fitted with a constant mean leaves no sill within the data: the range runs
    # to its upper bound (5 times the data diameter) and the result must say so in plain words.
    xy, noise = simulate(CovarianceModel((Structure("exponential", 0.05, 100.0),), 0.01), 100, seed=9)
    values = noise + xy[:, 0] / 100.0
    result = fit_model(xy, values, kernel="exponential", anisotropy=False)
    assert any("range hit its upper bound" in w and "linear variogram" in w and "Try a trend" in w
               for w in result.warnings)
    assert result.summary()["warnings"] == result.warnings


def test_pure_noise_reports_structure_or_range_at_a_bound():
    rng = np.random.default_rng(10)
    xy = rng.uniform(0.0, 1000.0, (80, 2))
    result = fit_model(xy, rng.normal(size=80), kernel="exponential", anisotropy=False)
    assert any("lower bound" in w for w in result.warnings)


def test_coincident_samples_fit_without_nan():
    xy, values = simulate(ISOTROPIC, 60, seed=11)
    xy = np.vstack([xy, xy[:5]])
    values = np.append(values, values[:5])
    result = fit_model(xy, values, kernel="gaussian", anisotropy=False)
    assert math.isfinite(result.log_likelihood)
    # Five exact repeats with identical values: under a nugget tau^2 two measurements at one place differ by
    # N(0, 2 tau^2), so differences of exactly 0 drive the likelihood's nugget to zero (theory of the Gaussian
    # model); the fit must reach the lower bound and say so rather than fail.
    assert any("nugget hit its lower bound" in warning for warning in result.warnings)


def test_large_data_warm_start_matches_the_full_search(monkeypatch):
    # Above the threshold the search starts on a subset; the refined optimum must be the full-data one.
    xy, values = simulate(ISOTROPIC, 240, seed=12)
    warm = fit_model(xy, values, kernel="matern32", anisotropy=True)
    monkeypatch.setattr(fit_search, "WARM_START_THRESHOLD", 100)
    monkeypatch.setattr(fit_search, "WARM_START_SIZE", 80)
    subset_started = fit_model(xy, values, kernel="matern32", anisotropy=True)
    assert subset_started.log_likelihood == pytest.approx(warm.log_likelihood, abs=1e-4)


def test_summary_is_json_ready():
    xy, values = simulate(ISOTROPIC, 60, seed=13)
    summary = fit_model(xy, values, kernel="exponential").summary()
    assert json.loads(json.dumps(summary)) == summary
    assert {"method", "likelihood", "log_likelihood", "aic", "bic", "n", "n_parameters", "warnings",
            "candidates"} <= set(summary)
    assert summary["likelihood"] == "exact"
    assert summary["n"] == 60
    assert set(summary["candidates"][0]) == {"family", "anisotropy", "log_likelihood", "aic", "bic"}


def test_progress_rises_to_one_and_cancel_stops():
    xy, values = simulate(ISOTROPIC, 50, seed=14)
    seen: list[float] = []
    fit_model(xy, values, kernel="auto", anisotropy=False, progress=seen.append)
    assert seen == sorted(seen) and seen[-1] == 1.0 and len(seen) > 3
    calls = []

    def stop_after_ten() -> bool:
        calls.append(1)
        return len(calls) > 10

    with pytest.raises(Cancelled):
        fit_model(xy, values, should_stop=stop_after_ten)


@pytest.mark.parametrize(("change", "message"), [
    (dict(xy=np.zeros((2, 2)) + [[0, 0], [1, 1]], values=np.array([1.0, 2.0])), "at least 3"),
    (dict(values=np.where(np.arange(30) == 4, np.nan, 1.0 + np.arange(30))), "missing or infinite"),
    (dict(values=np.full(30, 2.5)), "nothing to interpolate"),
    (dict(kernel="cubic"), "Unknown kernel"),
    (dict(method="least squares"), "Unknown fitting method"),
    (dict(kernel="exponential", smoothness=1.0), "matern"),
    (dict(kernel="matern", smoothness=9.0), "between"),
    (dict(method="wls", nested=True), "Nested structures"),
    (dict(mean="cubic"), "Unknown mean model"),
    (dict(mean=MeanModel("constant"), covariates=np.ones(30)), "names none"),
])
def test_bad_input_gets_a_message_that_says_what_to_change(change, message):
    rng = np.random.default_rng(15)
    arguments = dict(xy=rng.uniform(0, 100, (30, 2)), values=rng.normal(size=30))
    arguments.update(change)
    with pytest.raises(FieldcastError, match=message):
        fit_model(arguments.pop("xy"), arguments.pop("values"), **arguments)


def test_inputs_are_not_modified():
    xy, values = simulate(ISOTROPIC, 40, seed=16)
    xy.setflags(write=False)
    values.setflags(write=False)
    fit_model(xy, values, kernel="exponential", mean="linear")


def test_each_estimate_on_a_bound_gets_its_own_plain_warning():
    layout = ParameterLayout("matern", 2, True)
    bounds = parameter_bounds(layout, DataScales(smallest_spacing=10.0, diameter=1000.0, variance=2.0))
    inside = np.array([0.0 if low is None else (low + high) / 2 for low, high in bounds])
    assert bound_warnings(layout, inside, bounds) == []
    expected = {"log_partial_sill_1": "partial sill of the short-range structure hit its lower bound",
                "log_range_2": "range of the long-range structure hit its upper bound",
                "log_ratio": "anisotropy ratio hit its lower bound",
                "log_smoothness": "smoothness hit its upper bound",
                "log_nugget": "nugget hit its lower bound"}
    side = {"log_partial_sill_1": 0, "log_range_2": 1, "log_ratio": 0, "log_smoothness": 1, "log_nugget": 0}
    theta = inside.copy()
    for name, which in side.items():
        theta[layout.index(name)] = bounds[layout.index(name)][which]
    messages = bound_warnings(layout, theta, bounds)
    assert len(messages) == len(expected)
    for phrase in expected.values():
        assert sum(phrase in m for m in messages) == 1
    assert any("5000" in m for m in messages)  # the range bound in data units: 5 times the diameter


def scipy_iteration_limit_message() -> str:
    # scipy's own L-BFGS-B stop message at the iteration limit, from a run on its Rosenbrock test function.
    result = optimize.minimize(optimize.rosen, [-1.2, 1.0], jac=optimize.rosen_der, method="L-BFGS-B",
                               options={"maxiter": 1})
    assert not result.success and result.nit == 1
    return str(result.message)


def test_a_fit_stopped_by_the_iteration_limit_says_so(meuse):
    log_zinc = np.log(meuse.zinc)
    stopped = fit_model(meuse.xy, log_zinc, kernel="spherical", anisotropy=False, max_iterations=1)
    expected = (f"The optimiser stopped before convergence after 1 iterations: {scipy_iteration_limit_message()}; "
                "simplify the model (ANISOTROPY off, or one KERNEL such as exponential instead of auto), or, "
                "fitting in Python, raise the iteration limit (max_iterations).")
    assert expected in stopped.warnings
    assert expected in stopped.summary()["warnings"]
    # With the default limit the same fit converges and carries no such warning.
    converged = fit_model(meuse.xy, log_zinc, kernel="spherical", anisotropy=False)
    assert not any("optimiser stopped" in w for w in converged.warnings)
    assert converged.log_likelihood > stopped.log_likelihood


@pytest.mark.parametrize("limit", [0, -3, 2.5, "many", True])
def test_the_iteration_limit_must_be_a_positive_whole_number(meuse, limit):
    with pytest.raises(FieldcastError, match=f"iteration limit must be a whole number of 1 or more; got {limit!r}"):
        fit_model(meuse.xy, np.log(meuse.zinc), kernel="spherical", anisotropy=False, max_iterations=limit)


def test_fit_options_in_words_use_the_documented_choice_words():
    # The log words are the README's choice words of KERNEL, TREND and METHOD (read above), not internal names.
    kernel, trend, method = documented_choices("KERNEL")[-1], "linear", documented_choices("METHOD")[-1]
    words = FitOptions(kernel=kernel, anisotropy=False, mean=trend, method=method).describe()
    assert words == f"kernel {kernel}, anisotropy off, {trend} trend, {method.upper()}"
    xy = np.random.default_rng(0).uniform(0.0, 100.0, (10, 2))
    assert "quadratic trend" in FitOptions(mean=MeanModel.for_data("quadratic", xy)).describe()
