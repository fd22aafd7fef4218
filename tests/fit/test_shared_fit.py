"""One correlation model shared by several Meuse metals (intrinsic correlation), fitted jointly."""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy import linalg, optimize, stats

from fieldcast.algorithms.errors import Cancelled, FieldcastError
from fieldcast.algorithms.fit.fitting import VECCHIA_THRESHOLD, fit_model
from fieldcast.algorithms.fit.likelihood import evaluate_model
from fieldcast.algorithms.fit.options import FitOptions
from fieldcast.algorithms.fit.search import SearchProblem
from fieldcast.algorithms.fit.shared import JointObjective, fit_shared
from fieldcast.algorithms.model.covariance import CovarianceModel
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.parameters import ParameterLayout

METALS = ("zinc", "copper", "lead")


@pytest.fixture(scope="module")
def log_metals(meuse):
    return np.log(np.column_stack([getattr(meuse, name) for name in METALS]))


@pytest.fixture(scope="module")
def shared(meuse, log_metals):
    return fit_shared(meuse.xy, log_metals, FitOptions(kernel="spherical", anisotropy=True), list(METALS))


def objective_for(meuse, log_metals, method, layout):
    design = MeanModel.for_data("constant", meuse.xy).design(meuse.xy)
    problem = SearchProblem.standardise(meuse.xy, log_metals.mean(axis=1), design, method, None)
    return problem, JointObjective(problem.xy, log_metals, problem.basis, method, layout)


@pytest.mark.parametrize("method", ["reml", "ml"])
def test_joint_gradient_matches_finite_differences(meuse, log_metals, method):
    # The analytic gradient tr((m W - sum_f (M/q_f) a_f a_f^T) dR/dtheta) (Harville 1977, JASA 72, for one field)
    # against scipy's forward differences on the value.
    layout = ParameterLayout("matern32", 1, anisotropy=True)
    _, objective = objective_for(meuse, log_metals, method, layout)
    theta = np.array([np.log(0.8), np.log(0.3), np.log(0.5), 0.4, np.log(0.05)])
    _, gradient = objective.value_and_gradient(theta)
    numeric = optimize.approx_fprime(theta, lambda t: objective.value_and_gradient(t)[0], 1e-6)
    np.testing.assert_allclose(gradient, numeric, rtol=2e-4, atol=2e-3)


def test_joint_ml_value_is_the_sum_of_the_fields_gaussian_densities(meuse, log_metals):
    # -2 l of the joint ML objective equals -2 times the sum over fields of the multivariate normal log-density
    # (scipy.stats.multivariate_normal) of each field at its GLS mean and its profiled scale c_f = q_f / n.
    layout = ParameterLayout("exponential", 1, anisotropy=False)
    problem, objective = objective_for(meuse, log_metals, "ml", layout)
    theta = np.array([0.0, np.log(0.2), np.log(0.1)])
    value, _ = objective.value_and_gradient(theta)
    model = layout.unpack(theta)
    covariance = model.data_covariance(problem.xy)
    scales = objective.field_scales(theta)
    total = 0.0
    for column, scale in zip(log_metals.T, scales):
        solved = np.linalg.solve(covariance, np.column_stack([column, np.ones(len(column))]))
        beta = solved[:, 0].sum() / solved[:, 1].sum()  # GLS mean: 1^T K^-1 y / 1^T K^-1 1
        total += stats.multivariate_normal(np.full(len(column), beta), scale * covariance).logpdf(column)
    assert value == pytest.approx(-2.0 * total, rel=1e-10)


def test_joint_reml_value_is_the_sum_of_the_fields_own_reml(meuse, log_metals):
    # The profiled joint -2 l equals the sum over fields of each field's REML -2 l_R (Patterson & Thompson 1971;
    # evaluated by the single-field likelihood, likelihood.evaluate_model) at its own scale c_f = q_f / (n - p).
    layout = ParameterLayout("spherical", 1, anisotropy=True)
    problem, objective = objective_for(meuse, log_metals, "reml", layout)
    theta = np.array([0.0, np.log(0.4), np.log(0.5), 0.4, np.log(0.05)])
    value, _ = objective.value_and_gradient(theta)
    model = layout.unpack(theta)
    mean = MeanModel.for_data("constant", problem.xy)
    total = sum(evaluate_model(problem.xy, column, model.scaled(scale), mean, "reml").log_likelihood
                for column, scale in zip(log_metals.T, objective.field_scales(theta)))
    assert value == pytest.approx(-2.0 * total, rel=1e-10)


def test_one_field_gives_the_single_field_fit(meuse, log_metals):
    # With one field the joint likelihood is that field's profiled REML (Patterson & Thompson 1971), so the joint
    # fit lands on the single-field optimum: same log-likelihood up to the optimiser's tolerance.
    options = FitOptions(kernel="exponential", anisotropy=False)
    single = fit_model(meuse.xy, log_metals[:, 0], kernel="exponential", anisotropy=False)
    joint, = fit_shared(meuse.xy, log_metals[:, :1], options)
    assert joint.log_likelihood == pytest.approx(single.log_likelihood, abs=1e-3)
    assert joint.log_likelihood >= single.log_likelihood - 1e-3


def test_one_field_with_a_covariate_gives_the_single_field_fit(meuse, log_metals):
    # As above, with an external drift (square root of the distance to the river) given beside the settings.
    covariates = np.sqrt(np.asarray(meuse.dist))[:, None]
    mean = MeanModel.for_data("constant", meuse.xy, ("sqrt_dist",))
    single = fit_model(meuse.xy, log_metals[:, 0], kernel="exponential", anisotropy=False, mean=mean,
                       covariates=covariates)
    joint, = fit_shared(meuse.xy, log_metals[:, :1], FitOptions(kernel="exponential", anisotropy=False, mean=mean),
                        covariates=covariates)
    assert len(joint.coefficients) == 2
    assert joint.log_likelihood == pytest.approx(single.log_likelihood, abs=1e-3)
    np.testing.assert_allclose(joint.coefficients, single.coefficients, rtol=1e-2)


def contrast_log_likelihood(xy, values, covariance) -> float:
    """REML log-likelihood of a constant-mean field, computed without the fit code.

    The Gaussian log-density (scipy.stats.multivariate_normal) of the error contrasts ``A^T y``, ``A`` an
    orthonormal basis of the complement of the constant (scipy.linalg.null_space), minus ``log|X^T X| / 2`` with
    ``X = 1``: Harville (1974, Biometrika 61, 383-385) shows ``log f(A^T y) = l_R + log|X^T X| / 2`` for the REML
    log-likelihood ``l_R`` of Patterson & Thompson (1971), which is the engine's convention.
    """
    contrasts = linalg.null_space(np.ones((1, len(values))))
    density = stats.multivariate_normal(np.zeros(contrasts.shape[1]),
                                        contrasts.T @ covariance.data_covariance(xy) @ contrasts)
    return float(density.logpdf(contrasts.T @ values)) - 0.5 * np.log(len(values))


def profiled_scale(xy, values, correlation) -> float:
    """REML estimate of the scale ``c`` of ``c R`` for a fixed correlation model ``R`` (sill 1).

    Setting d l_R / dc = 0 gives ``c = z^T (A^T R A)^-1 z / (n - p)`` with ``z = A^T y`` (Harville 1977, JASA 72,
    320-340, the profiled variance of REML); here p = 1.
    """
    contrasts = linalg.null_space(np.ones((1, len(values))))
    z = contrasts.T @ values
    return float(z @ np.linalg.solve(contrasts.T @ correlation.data_covariance(xy) @ contrasts, z)) / len(z)


def test_each_field_is_the_shared_correlation_at_its_own_reml_scale(meuse, log_metals, shared):
    # Checked against REML computed independently (contrast densities with scipy, see contrast_log_likelihood):
    # every field's reported log-likelihood is that of the first field's correlation at the field's own profiled
    # REML scale, and that common correlation is a maximum of the summed REML: nearby common correlations, each
    # field at its best scale, do worse (a maximum: every move lowers the sum; the moves are a tenth of the range
    # and ratio, 10 degrees of azimuth and 30 % of the nugget, far beyond the optimiser's stopping tolerance).
    first = shared[0].covariance
    correlation = first.scaled(1.0 / first.sill)

    def summed_reml(model) -> float:
        return sum(contrast_log_likelihood(meuse.xy, column, model.scaled(profiled_scale(meuse.xy, column, model)))
                   for column in log_metals.T)

    for result, column in zip(shared, log_metals.T):
        scale = profiled_scale(meuse.xy, column, correlation)
        assert result.covariance.sill == pytest.approx(scale, rel=1e-6)
        assert result.log_likelihood == pytest.approx(
            contrast_log_likelihood(meuse.xy, column, correlation.scaled(scale)), abs=1e-8)
    best = summed_reml(correlation)
    assert best == pytest.approx(sum(result.log_likelihood for result in shared), abs=1e-8)
    structure = correlation.structures[0]
    moves = [dict(range=structure.range * 1.1), dict(range=structure.range / 1.1),
             dict(azimuth=structure.azimuth + 10.0), dict(azimuth=structure.azimuth - 10.0),
             dict(ratio=min(structure.ratio * 1.1, 1.0)), dict(ratio=structure.ratio / 1.1)]
    for move in moves:
        moved = CovarianceModel((replace(structure, **move),), correlation.nugget)
        assert summed_reml(moved) < best, move
    for nugget in (correlation.nugget * 1.3, correlation.nugget / 1.3):
        assert summed_reml(CovarianceModel(correlation.structures, nugget)) < best, nugget
    assert all("shared by 3 fields" in result.likelihood for result in shared)


def test_shared_model_on_meuse_is_close_to_each_metal_own_fit(meuse, log_metals, shared):
    # Sum of log-likelihoods: the joint optimum can only lose against three free fits, and on Meuse the metals'
    # log-variograms are alike (all follow the river; their own REML fits differ by a few percent in range and
    # azimuth), so it loses little: each metal within 2.5 log-likelihood units of its own fit (common practice:
    # differences of a few units are small for models with 2-3 more parameters).
    own = [fit_model(meuse.xy, column, kernel="spherical", anisotropy=True) for column in log_metals.T]
    losses = [single.log_likelihood - joint.log_likelihood for single, joint in zip(own, shared)]
    assert min(losses) > -0.05  # each own fit is that metal's optimum (up to the optimiser's tolerance)
    assert max(losses) < 2.5
    # The shared anisotropy follows the river like the single fits: the Meuse flows roughly north-north-east along
    # the study area (from memory), and the metals' own fits put the major axis 20-30 degrees east of north.
    own_azimuths = [fit.covariance.structures[0].azimuth for fit in own]
    assert min(own_azimuths) - 5.0 < shared[0].covariance.structures[0].azimuth < max(own_azimuths) + 5.0


def test_rescaling_a_field_rescales_only_its_sill(meuse, log_metals, shared):
    # The model is blind to units: copper in other units (times 10) gets the same correlation and 100 times the sill.
    rescaled = log_metals * np.array([1.0, 10.0, 1.0])
    again = fit_shared(meuse.xy, rescaled, FitOptions(kernel="spherical", anisotropy=True))
    assert again[1].covariance.sill == pytest.approx(100.0 * shared[1].covariance.sill, rel=1e-4)
    assert again[0].covariance.structures[0].range == pytest.approx(shared[0].covariance.structures[0].range,
                                                                    rel=1e-4)


@pytest.mark.parametrize("options, message", [
    (FitOptions(method="wls"), "fitted by likelihood"),
    (FitOptions(mean="known", known_mean=5.0), "known mean"),
])
def test_settings_a_shared_fit_cannot_take(meuse, log_metals, options, message):
    with pytest.raises(FieldcastError, match=message):
        fit_shared(meuse.xy, log_metals, options)


def test_bad_fields_are_named(meuse, log_metals):
    broken = log_metals.copy()
    broken[3, 1] = np.nan
    with pytest.raises(FieldcastError, match="copper"):
        fit_shared(meuse.xy, broken, FitOptions(), list(METALS))
    with pytest.raises(FieldcastError, match="one column of values per field"):
        fit_shared(meuse.xy, log_metals[:, 0], FitOptions())
    too_many = np.zeros((VECCHIA_THRESHOLD + 1, 2))
    with pytest.raises(FieldcastError, match="one model per field"):
        fit_shared(np.zeros((VECCHIA_THRESHOLD + 1, 2)), too_many, FitOptions())


def test_progress_reaches_the_end_and_cancel_stops(meuse, log_metals):
    seen = []
    fit_shared(meuse.xy, log_metals, FitOptions(kernel="exponential", anisotropy=False), progress=seen.append)
    assert seen[-1] == 1.0 and all(b >= a for a, b in zip(seen, seen[1:]))
    with pytest.raises(Cancelled):
        fit_shared(meuse.xy, log_metals, FitOptions(kernel="exponential", anisotropy=False), should_stop=lambda: True)


def test_a_joint_fit_stopped_by_the_iteration_limit_says_so(meuse, log_metals, shared):
    # One L-BFGS-B iteration cannot reach the optimum the default limit finds (scipy reports the limit reached).
    stopped = fit_shared(meuse.xy, log_metals, FitOptions(kernel="spherical", anisotropy=True, max_iterations=1),
                         list(METALS))
    assert all(any("stopped before convergence after 1 iterations" in w for w in r.warnings) for r in stopped)
    assert not any("stopped before convergence" in w for r in shared for w in r.warnings)
    assert sum(r.log_likelihood for r in stopped) < sum(r.log_likelihood for r in shared)


def test_a_shared_fit_warns_like_a_single_fit_about_few_samples(meuse, log_metals, shared):
    # Common practice (a rule of thumb): fewer than about 30 samples determine a covariance model poorly.
    few = fit_shared(meuse.xy[:20], log_metals[:20], FitOptions(kernel="exponential", anisotropy=False),
                     list(METALS))
    for result in few:
        assert sum(w.startswith("Only 20 samples") for w in result.warnings) == 1
    assert not any(w.startswith("Only ") for result in shared for w in result.warnings)


def test_a_shared_fit_of_white_noise_warns_that_no_structure_is_resolved():
    # Simulation study (invented values): two independent standard normal fields on a regular 70 m grid of
    # 100 points, so no structure exists at any scale.
    spacing = 70.0
    grid = np.array([(x, y) for x in np.arange(10) * spacing for y in np.arange(10) * spacing])
    flagged = 0
    for seed in range(4):
        values = np.random.default_rng(seed).standard_normal((len(grid), 2))
        results = fit_shared(grid, values, FitOptions(kernel="exponential", anisotropy=False))
        short = results[0].covariance.structures[0].effective_range < spacing
        for result in results:
            assert any("resolve no spatial structure" in w for w in result.warnings) == short
        flagged += short
    assert flagged >= 2
