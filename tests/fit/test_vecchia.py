"""Vecchia likelihood and fit against the exact likelihood, on Meuse and on simulated fields."""
from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import chi2

from fieldcast.algorithms.errors import Cancelled, FieldcastError
from fieldcast.algorithms.fit import fitting
from fieldcast.algorithms.fit.fitting import fit_model
from fieldcast.algorithms.fit.likelihood import MeanBasis, log_likelihood
from fieldcast.algorithms.fit.minimiser import minimise
from fieldcast.algorithms.fit.options import FitOptions
from fieldcast.algorithms.fit.search import SearchProblem
from fieldcast.algorithms.fit.vecchia import VecchiaData, VecchiaObjective, VecchiaPlan, vecchia_log_likelihood
from fieldcast.algorithms.fit.vecchia_fit import fit_vecchia
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure, search_frame
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.parameters import ParameterLayout, parameter_bounds
from fieldcast.algorithms.simulate.circulant import UnconditionalGenerator

ANISOTROPIC = CovarianceModel((Structure("exponential", 0.6, 400.0, azimuth=40.0, ratio=0.5),), 0.05)
TRUE_MODEL = CovarianceModel((Structure("exponential", 1.0, 1500.0, azimuth=30.0, ratio=0.5),), 0.1)


def simulated_samples(n, seed, model=TRUE_MODEL, side=200, pixel=50.0):
    """``n`` samples of a field drawn from ``model`` on a 10 km square, plus nugget noise.

    The latent field is one circulant-embedding realisation (Wood & Chan 1994; algorithms.simulate.circulant) on a
    ``side x side`` lattice; the samples are ``n`` distinct lattice cells picked at random, so their joint law
    is exactly the model's.
    """
    rng = np.random.default_rng(seed)
    field, _ = UnconditionalGenerator(model, (side, side), pixel).draw_pair(rng)
    cells = rng.choice(side * side, n, replace=False)
    rows, cols = np.divmod(cells, side)
    xy = np.column_stack([(cols + 0.5) * pixel, side * pixel - (rows + 0.5) * pixel])
    return xy, 5.0 + field.ravel()[cells] + rng.normal(0.0, np.sqrt(model.nugget), n)


@pytest.fixture(scope="module")
def log_zinc(meuse):
    return np.log(meuse.zinc)


@pytest.mark.parametrize("kind", ["known", "constant", "linear", "quadratic"])
@pytest.mark.parametrize("method", ["reml", "ml"])
def test_conditioning_on_all_previous_samples_is_exact(meuse, log_zinc, kind, method):
    # Published identity: p(y) = prod_i p(y_i | y_1..y_{i-1}) for any ordering (chain rule of probability; Vecchia
    # 1988, JRSS B 50, 297-312), so with m = n - 1 neighbours the Vecchia likelihood is the exact one, REML included
    # (the restricted form uses the same K~ = K). Exact reference: likelihood.log_likelihood.
    mean = MeanModel.for_data(kind, meuse.xy, known_value=6.0)
    exact = log_likelihood(meuse.xy, log_zinc, ANISOTROPIC, mean, method)
    approximate = vecchia_log_likelihood(meuse.xy, log_zinc, ANISOTROPIC, mean, neighbours=154, method=method)
    assert approximate == pytest.approx(exact, rel=1e-11)


def test_covariates_with_all_previous_samples_is_exact(meuse, log_zinc):
    # Same identity with an external drift (square root of the distance to the river, published with the data).
    mean = MeanModel.for_data("constant", meuse.xy, ("sqrt_dist",))
    covariate = np.sqrt(meuse.dist)
    exact = log_likelihood(meuse.xy, log_zinc, ANISOTROPIC, mean, "reml", covariate)
    approximate = vecchia_log_likelihood(meuse.xy, log_zinc, ANISOTROPIC, mean, neighbours=500, covariates=covariate)
    assert approximate == pytest.approx(exact, rel=1e-11)


def test_thirty_neighbours_within_one_percent_on_meuse_and_two_thousand_samples(meuse, log_zinc):
    # Datta et al. (2016, JASA 111) find 15-25 neighbours enough for a close approximation (from memory); the issue
    # asks for 1 % of the exact log-likelihood up to n = 2,000 (common practice for "close"), here with m = 30.
    mean = MeanModel.for_data("constant", meuse.xy)
    exact = log_likelihood(meuse.xy, log_zinc, ANISOTROPIC, mean)
    assert vecchia_log_likelihood(meuse.xy, log_zinc, ANISOTROPIC, mean) == pytest.approx(exact, rel=0.01)
    xy, values = simulated_samples(2000, seed=11)
    mean = MeanModel.for_data("linear", xy)
    exact = log_likelihood(xy, values, TRUE_MODEL, mean)
    assert vecchia_log_likelihood(xy, values, TRUE_MODEL, mean) == pytest.approx(exact, rel=0.01)


@pytest.mark.parametrize("method", ["reml", "ml"])
@pytest.mark.parametrize("case", ["anisotropic", "nested_matern"])
def test_gradient_matches_central_differences(meuse, log_zinc, method, case):
    # Numerical check of the analytic gradient: central differences of -2l with step 1e-5 in log space
    # (truncation error O(step^2)).
    if case == "anisotropic":
        layout, model = ParameterLayout("exponential", 1, True), ANISOTROPIC
    else:
        layout = ParameterLayout("matern", 2, True)
        model = CovarianceModel((Structure("matern", 0.3, 200.0, 40.0, 0.6, 1.3),
                                 Structure("matern", 0.3, 900.0, 40.0, 0.6, 1.3)), 0.05)
    mean = MeanModel.for_data("linear", meuse.xy)
    data = VecchiaData(meuse.xy, log_zinc, MeanBasis.from_design(mean.design(meuse.xy)), method,
                       VecchiaPlan.build(meuse.xy, 12))
    objective = VecchiaObjective(data, layout)
    theta = layout.pack(model)
    _, gradient = objective.value_and_gradient(theta)
    step = 1e-5
    numerical = [(objective.value(theta + e) - objective.value(theta - e)) / (2 * step)
                 for e in np.eye(len(theta)) * step]
    np.testing.assert_allclose(gradient, numerical, rtol=1e-5, atol=1e-5)


def test_conditioning_sets_are_the_nearest_previous_samples():
    # Brute force by definition: for every position i of the ordering, the m nearest among positions < i
    # (distances in the anisotropy frame of the structure).
    xy, _ = simulated_samples(1500, seed=3)
    structure = TRUE_MODEL.structures[0]
    plan = VecchiaPlan.build(xy, 10, structure)
    assert np.array_equal(np.sort(plan.order), np.arange(len(xy)))
    frame = search_frame(structure, xy)[plan.order]
    for i in (0, 1, 5, 10, 11, 600, 1023, 1024, 1025, 1499):
        gaps = np.hypot(*(frame[:i] - frame[i]).T)
        expected = np.sort(gaps)[:10]
        found = plan.neighbours[i][plan.valid[i]]
        assert np.all(found < i)
        np.testing.assert_allclose(np.sort(gaps[found]), expected, rtol=1e-12)


def test_cut_sets_are_the_nearest_previous_samples_of_fewer_neighbours():
    # The sets of a plan cut to m neighbours are those a plan built with m finds (uniform random points: no ties).
    xy = np.random.default_rng(3).uniform(0.0, 1000.0, (1500, 2))
    cut, built = VecchiaPlan.build(xy, 30).nearest(10), VecchiaPlan.build(xy, 10)
    assert np.array_equal(cut.order, built.order) and np.array_equal(cut.valid, built.valid)
    assert np.array_equal(np.where(cut.valid, cut.neighbours, -1), np.where(built.valid, built.neighbours, -1))


@pytest.mark.parametrize("method", ["ml", "reml"])
def test_information_with_all_previous_samples_is_the_exact_fisher_information(method):
    # Published formula: the Fisher information of Gaussian covariance parameters is
    # I_jk = 1/2 tr(K^-1 dK_j K^-1 dK_k) (Harville 1977, JASA 72, 320-338; the mean's block is zero), and with
    # m = n - 1 the Vecchia law is the exact one, so Guinness's (2021) sum of the conditionals' expected score
    # products is I exactly; the engine gives it for -2 l, i.e. 2 I. The REML fit uses the same matrix. dK by
    # central differences (step 1e-6 in log space) of the dense covariance matrix, not the engine's derivatives.
    rng = np.random.default_rng(1)
    xy = rng.uniform(0.0, 1000.0, (80, 2))
    values = rng.normal(size=80)  # the information does not depend on the values
    layout = ParameterLayout("matern32", 2, True)
    model = CovarianceModel((Structure("matern32", 0.6, 150.0, 30.0, 0.6),
                             Structure("matern32", 0.4, 500.0, 30.0, 0.6)), 0.1)
    basis = MeanBasis.from_design(MeanModel.for_data("constant", xy).design(xy))
    objective = VecchiaObjective(VecchiaData(xy, values, basis, method, VecchiaPlan.build(xy, 79)), layout)
    theta = layout.pack(model)
    _, _, information = objective.value_gradient_information(theta)
    inverse = np.linalg.inv(model.data_covariance(xy))
    step = 1e-6
    derivatives = [(layout.unpack(theta + e).data_covariance(xy) - layout.unpack(theta - e).data_covariance(xy))
                   / (2 * step) for e in np.eye(len(theta)) * step]
    exact = np.array([[np.trace(inverse @ a @ inverse @ b) for b in derivatives] for a in derivatives])
    np.testing.assert_allclose(information, exact, rtol=1e-6, atol=1e-6 * np.abs(exact).max())


def test_fisher_scoring_reaches_the_optimum_of_l_bfgs_b():
    # The fit (warm start with 10 neighbours, then Fisher scoring with 30) must reach the optimum that L-BFGS-B
    # alone finds on the same Vecchia REML likelihood (30 neighbours) from a far start with tight tolerances:
    # within 0.01 of log-likelihood (far below the statistical uncertainty, about 0.5 per parameter; common
    # practice) and 2 % in each parameter.
    xy, values = simulated_samples(1500, seed=5)
    options = FitOptions(kernel="exponential", anisotropy=False, mean="constant")
    fit = fit_vecchia(xy, values, options, subset_size=600)
    problem = SearchProblem.standardise(xy, values, fit.mean.design(xy), "reml", None)
    layout = ParameterLayout("exponential", 1, False)
    data = VecchiaData(problem.xy, problem.y, problem.basis, "reml", VecchiaPlan.build(problem.xy, 30))
    objective = VecchiaObjective(data, layout)
    start = layout.pack(CovarianceModel((Structure("exponential", 0.5, 0.05),), 0.3))
    result = minimise(objective.value_and_gradient, start, parameter_bounds(layout, problem.internal_scales),
                      samples=len(values), log_likelihood_tolerance=1e-9, gradient_tolerance=1e-7,
                      max_iterations=500)
    assert result.success
    reference = problem.to_data_units(layout.unpack(result.x))
    assert fit.log_likelihood == pytest.approx(problem.log_likelihood(objective.value(result.x)), abs=0.01)
    assert fit.log_likelihood >= problem.log_likelihood(objective.value(result.x)) - 0.01
    ours, theirs = fit.covariance.structures[0], reference.structures[0]
    assert ours.range == pytest.approx(theirs.range, rel=0.02)
    assert ours.partial_sill == pytest.approx(theirs.partial_sill, rel=0.02)
    assert fit.covariance.nugget == pytest.approx(reference.nugget, rel=0.02)


def within_likelihood_ratio_region(xy, values, exact_fit, model, n_parameters):
    """Whether ``model`` lies in the 95 % likelihood-ratio confidence region of an exact REML fit.

    Wilks (1938, Ann. Math. Statist. 9, 60-62): 2 (l(theta_hat) - l(theta)) is asymptotically chi-square with
    as many degrees of freedom as parameters, so the region is 2 (l_max - l) <= chi2_{k, 0.95}.
    """
    at_model = log_likelihood(xy, values, model, exact_fit.mean, "reml")
    return 2.0 * (exact_fit.log_likelihood - at_model) <= chi2.ppf(0.95, n_parameters)


def test_vecchia_fit_equals_exact_reml_fit_on_the_same_samples():
    # Same 1,500 samples: the Vecchia REML estimate must be statistically indistinguishable from the exact
    # one, i.e. inside its 95 % likelihood-ratio region (Wilks 1938); in fact it is much closer.
    xy, values = simulated_samples(1500, seed=5)
    exact = fit_model(xy, values, kernel="exponential", anisotropy=False, mean="constant")
    approximate = fit_vecchia(xy, values, FitOptions(kernel="exponential", anisotropy=False, mean="constant"),
                              subset_size=600)
    assert approximate.likelihood == "vecchia (30 neighbours)"
    assert within_likelihood_ratio_region(xy, values, exact, approximate.covariance, 3)
    ours, theirs = approximate.covariance.structures[0], exact.covariance.structures[0]
    assert ours.range == pytest.approx(theirs.range, rel=0.05)
    assert approximate.covariance.sill == pytest.approx(exact.covariance.sill, rel=0.05)


def test_vecchia_fit_on_many_samples_agrees_with_exact_reml_on_a_subset():
    # 4,000 samples (the 50,000 of the issue run in tools/bench_scale.py, too slow for the suite): the Vecchia
    # REML estimate from all of them lies inside the 95 % likelihood-ratio region (Wilks 1938) of the exact REML
    # fit on 1,000 of them, and the anisotropy it finds is that of the simulated model (azimuth 30, ratio 0.5)
    # within the subset's uncertainty.
    xy, values = simulated_samples(4000, seed=8)
    subset = np.random.default_rng(99).choice(len(values), 1000, replace=False)
    exact = fit_model(xy[subset], values[subset], kernel="exponential", anisotropy=True, mean="constant")
    approximate = fit_vecchia(xy, values, FitOptions(kernel="exponential", anisotropy=True, mean="constant"),
                              subset_size=500)
    assert within_likelihood_ratio_region(xy[subset], values[subset], exact, approximate.covariance, 5)
    structure = approximate.covariance.structures[0]
    assert abs(structure.azimuth - 30.0) < 10.0 and abs(structure.ratio - 0.5) < 0.1


def test_bad_settings_say_what_to_change(meuse, log_zinc):
    mean = MeanModel.for_data("constant", meuse.xy)
    with pytest.raises(FieldcastError, match="neighbour count"):
        vecchia_log_likelihood(meuse.xy, log_zinc, ANISOTROPIC, mean, neighbours=0)
    with pytest.raises(FieldcastError, match="Unknown likelihood"):
        vecchia_log_likelihood(meuse.xy, log_zinc, ANISOTROPIC, mean, method="wls")
    with pytest.raises(FieldcastError, match="choose METHOD reml or ml"):
        fit_vecchia(meuse.xy, log_zinc, FitOptions(kernel="exponential", method="wls"))


def test_a_vecchia_fit_stopped_by_the_iteration_limit_says_so():
    # The last run of the fit is Fisher scoring with the full sets; held to one iteration it cannot gain less than
    # the tolerance and must say that it stopped at the limit.
    xy, values = simulated_samples(400, seed=3)
    settings = {"kernel": "exponential", "anisotropy": False, "mean": "constant"}
    stopped = fit_vecchia(xy, values, FitOptions(**settings, max_iterations=1), subset_size=200)
    notes = [w for w in stopped.warnings if w.startswith("The optimiser stopped before convergence after 1 iterations")]
    assert len(notes) == 1 and "Fisher scoring reached the iteration limit" in notes[0]
    assert "raise the iteration limit" in notes[0]
    converged = fit_vecchia(xy, values, FitOptions(**settings), subset_size=200)
    assert not any("optimiser stopped" in w for w in converged.warnings)
    assert converged.log_likelihood > stopped.log_likelihood


def test_a_vecchia_fit_reports_progress_and_stops_when_asked():
    xy, values = simulated_samples(400, seed=3)
    options = FitOptions(kernel="exponential", anisotropy=False, mean="constant")
    seen: list[float] = []
    fit_vecchia(xy, values, options, subset_size=200, progress=seen.append)
    assert seen[-1] == 1.0 and all(b >= a for a, b in zip(seen, seen[1:])) and len(seen) > 3
    calls = []

    def stop_after_ten() -> bool:
        calls.append(1)
        return len(calls) > 10

    with pytest.raises(Cancelled):
        fit_vecchia(xy, values, options, subset_size=200, should_stop=stop_after_ten)


def test_fit_model_hands_large_data_to_the_vecchia_fit(monkeypatch):
    # Above fitting.VECCHIA_THRESHOLD samples fit_model uses the Vecchia likelihood and says so; the threshold is
    # lowered here so the hand-over runs on a small simulated set.
    monkeypatch.setattr(fitting, "VECCHIA_THRESHOLD", 300)
    xy, values = simulated_samples(400, seed=3)
    result = fit_model(xy, values, kernel="exponential", anisotropy=False, mean="constant")
    assert result.likelihood.startswith("vecchia")
    assert fit_model(xy[:300], values[:300], kernel="exponential", anisotropy=False).likelihood == "exact"
