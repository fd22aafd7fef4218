"""Small exact cases of censored samples: the likelihood, the truncated conditional draws, the parsing of limits."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from fieldcast.algorithms import (
    Cancelled,
    CovarianceModel,
    FieldcastError,
    FitOptions,
    GridSpec,
    ImputedKriging,
    KrigingPredictor,
    MeanModel,
    Structure,
    TruncatedGibbs,
    censored_log_likelihood,
    fit_censored,
    impute_censored,
    minimum_pile_warning,
    parse_limit_texts,
    simulate_conditional,
    substituted,
)

XY = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.5], [2.0, 2.0], [0.7, 0.4], [3.0, 0.5]])
MODEL = CovarianceModel((Structure("exponential", 1.0, 1.2),), nugget=0.1)
COV = MODEL.data_covariance(XY)
MEAN = np.full(len(XY), 0.5)
VALUES = np.array([0.9, 0.2, -0.4, 1.3, 0.0, 0.6])


def joint_pdf(full: np.ndarray) -> float:
    return stats.multivariate_normal(MEAN, COV).pdf(full)


def test_one_censored_value_matches_the_integral_of_the_joint_density():
    # Source: definition of the censored likelihood, the joint normal density integrated over the censoring
    # region {z_c < l} with the observed values fixed; integrated here by scipy.integrate.quad.
    censored = np.zeros(len(XY), dtype=bool)
    censored[4] = True

    def density(z):
        full = VALUES.copy()
        full[4] = z
        return joint_pdf(full)

    direct, _ = integrate.quad(density, -np.inf, VALUES[4], epsabs=1e-14, epsrel=1e-10)
    assert censored_log_likelihood(VALUES, censored, MEAN, COV) == pytest.approx(np.log(direct), abs=1e-7)


def test_two_censored_values_match_the_double_integral_of_the_joint_density():
    # Source: as above, the joint density integrated over both censored coordinates (scipy.integrate.dblquad);
    # the implementation takes the bivariate probability from scipy's multivariate normal cdf instead.
    censored = np.zeros(len(XY), dtype=bool)
    censored[[1, 4]] = True

    def density(z4, z1):
        full = VALUES.copy()
        full[1], full[4] = z1, z4
        return joint_pdf(full)

    direct, _ = integrate.dblquad(density, -8.0, VALUES[1], -8.0, VALUES[4], epsabs=1e-13, epsrel=1e-8)
    assert censored_log_likelihood(VALUES, censored, MEAN, COV) == pytest.approx(np.log(direct), abs=1e-4)


def test_all_censored_is_the_multivariate_normal_probability_of_the_region():
    # Source: with every value censored the likelihood is P(Z < l), scipy.stats.multivariate_normal.cdf.
    censored = np.ones(3, dtype=bool)
    sub = COV[:3, :3]
    expected = np.log(stats.multivariate_normal(MEAN[:3], sub).cdf(VALUES[:3]))
    assert censored_log_likelihood(VALUES[:3], censored, MEAN[:3], sub) == pytest.approx(expected, abs=1e-4)


def test_no_censored_value_is_the_normal_log_density():
    # Source: scipy.stats.multivariate_normal.logpdf.
    expected = stats.multivariate_normal(MEAN, COV).logpdf(VALUES)
    assert censored_log_likelihood(VALUES, np.zeros(len(XY), bool), MEAN, COV) == pytest.approx(expected, rel=1e-12)


def conditional(index: int) -> tuple[float, float]:
    """Mean and sd of value ``index`` given the others (the Gaussian conditioning formula)."""
    rest = np.arange(len(XY)) != index
    weights = np.linalg.solve(COV[np.ix_(rest, rest)], COV[rest, index])
    return (MEAN[index] + weights @ (VALUES[rest] - MEAN[rest]),
            float(np.sqrt(COV[index, index] - COV[rest, index] @ weights)))


def test_one_censored_value_draws_follow_the_truncated_normal_moments():
    # Source: mean and variance of a normal truncated above at b, mu - s phi(b)/Phi(b) and
    # s^2 [1 - b phi(b)/Phi(b) - (phi(b)/Phi(b))^2] (Tallis 1961; scipy.stats.truncnorm gives the same).
    censored = np.zeros(len(XY), dtype=bool)
    censored[4] = True
    centre, sd = conditional(4)
    b = (VALUES[4] - centre) / sd
    ratio = stats.norm.pdf(b) / stats.norm.cdf(b)
    expected_mean = centre - sd * ratio
    expected_var = sd ** 2 * (1 - b * ratio - ratio ** 2)
    draws = TruncatedGibbs(VALUES, censored, MEAN, COV).draws(20000, np.random.default_rng(3), burn_in=0, thin=1)
    assert draws.max() <= VALUES[4]
    # 20,000 independent draws: the mean's standard error is below 0.01 sd (4 of them allowed).
    assert draws.mean() == pytest.approx(expected_mean, abs=4 * np.sqrt(expected_var / 20000))
    assert draws.var() == pytest.approx(expected_var, rel=0.05)
    assert expected_mean == pytest.approx(stats.truncnorm(-np.inf, b, centre, sd).mean(), rel=1e-9)


def test_two_censored_values_draws_match_the_integrated_conditional_mean():
    # Source: E[Z_1 | z_o, Z_1 < l_1, Z_4 < l_4] as the ratio of two double integrals of the joint density
    # (scipy.integrate.dblquad), against the Gibbs chain's average.
    censored = np.zeros(len(XY), dtype=bool)
    censored[[1, 4]] = True

    def density(z4, z1, weight):
        full = VALUES.copy()
        full[1], full[4] = z1, z4
        return joint_pdf(full) * (z1 if weight else 1.0)

    top, _ = integrate.dblquad(density, -8.0, VALUES[1], -8.0, VALUES[4], args=(True,), epsabs=1e-13)
    bottom, _ = integrate.dblquad(density, -8.0, VALUES[1], -8.0, VALUES[4], args=(False,), epsabs=1e-13)
    draws = TruncatedGibbs(VALUES, censored, MEAN, COV).draws(20000, np.random.default_rng(5), burn_in=50, thin=2)
    assert np.all(draws <= VALUES[[1, 4]])
    # Tolerance from the chain's spread (correlated draws: a generous 0.03).
    assert draws[:, 0].mean() == pytest.approx(top / bottom, abs=0.03)


def test_draws_are_reproducible_with_a_seed():
    censored = np.zeros(len(XY), dtype=bool)
    censored[[1, 4]] = True
    sampler = TruncatedGibbs(VALUES, censored, MEAN, COV)
    first = sampler.draws(5, np.random.default_rng(11))
    assert np.array_equal(first, sampler.draws(5, np.random.default_rng(11)))


def test_text_limits_are_read_with_or_without_a_space():
    values, censored = parse_limit_texts(["<0.5", "< 0.5", "1.25", " 3 ", "<1e-2", "n.d.", None, "<0,5", 2.0])
    assert np.array_equal(censored, [True, True, False, False, True, False, False, False, False])
    assert np.allclose(values[[0, 1, 2, 3, 4, 8]], [0.5, 0.5, 1.25, 3.0, 0.01, 2.0])
    assert np.isnan(values[[5, 6, 7]]).all()


def test_substitution_replaces_only_the_limits():
    out = substituted(np.array([0.5, 2.0, 1.0]), np.array([True, False, True]), 0.5)
    assert np.allclose(out, [0.25, 2.0, 0.5])
    with pytest.raises(FieldcastError, match="SUBSTITUTION_FACTOR"):
        substituted(np.array([1.0]), np.array([True]), 0.0)


def test_meuse_cadmium_minimum_pile_is_flagged(meuse):
    # Source: the published Meuse data (tests/data/README.md): 21 of the 155 cadmium values are 0.2 ppm.
    warning = minimum_pile_warning(meuse.cadmium, np.zeros(155, bool), "cadmium")
    assert warning is not None and warning.startswith("21 of 155 values of cadmium equal its smallest value 0.2")
    assert minimum_pile_warning(meuse.zinc, np.zeros(155, bool), "zinc") is None


def test_imputed_kriging_combines_the_sets_by_rubins_rules():
    # Source: Rubin (1987) combining rules, total variance W + (1 + 1/m) B, checked against kriging each completed
    # set on its own with the engine's KrigingPredictor (itself checked against published cases in tests/predict).
    censored = np.zeros(len(XY), dtype=bool)
    censored[[1, 4]] = True
    mean_model = MeanModel()
    sets = impute_censored(XY, VALUES, censored, MODEL, mean_model, np.array([0.5]), count=8, seed=2)
    assert sets.shape == (8, len(XY)) and np.all(sets[:, censored] <= VALUES[censored])
    assert np.array_equal(sets[:, ~censored], np.broadcast_to(VALUES[~censored], (8, 4)))
    targets = np.array([[0.5, 0.5], [2.5, 1.0]])
    each = [KrigingPredictor(XY, s, MODEL, mean_model).predict(targets) for s in sets]
    means = np.array([m for m, _ in each])
    mean, variance = ImputedKriging(XY, sets, MODEL, mean_model).predict(targets)
    assert np.allclose(mean, means.mean(axis=0))
    assert np.allclose(variance, each[0][1] + (1 + 1 / 8) * means.var(axis=0, ddof=1))


def test_each_realisation_is_conditioned_on_its_own_completed_set():
    # Source: conditioning by kriging is linear in the data (the kriging weights do not depend on them), so a
    # realisation conditioned on set r differs from one conditioned on the values by the kriging weights applied
    # to their difference; the weights from the engine's KrigingPredictor.
    grid = GridSpec(0.0, 3.0, 0.25, 12, 14)
    censored = np.zeros(len(XY), dtype=bool)
    censored[[1, 4]] = True
    sets = impute_censored(XY, VALUES, censored, MODEL, MeanModel(), np.array([0.5]), count=3, seed=4)
    plain = simulate_conditional(XY, VALUES, MODEL, MeanModel(), grid, n_realisations=5, seed=9)
    drawn = simulate_conditional(XY, VALUES, MODEL, MeanModel(), grid, n_realisations=5, seed=9, value_sets=sets)
    weights = KrigingPredictor(XY, VALUES, MODEL, MeanModel()).weights(grid.cell_centres())
    for r in range(5):
        shift = ((sets[r % 3] - VALUES) @ weights).reshape(grid.n_rows, grid.n_cols)
        assert np.allclose(drawn.realisations[r] - plain.realisations[r], shift, atol=1e-10)


def test_a_cancelled_censored_fit_stops():
    censored = np.zeros(len(XY), dtype=bool)
    censored[4] = True
    with pytest.raises(Cancelled):
        fit_censored(XY, VALUES, censored, FitOptions(kernel="exponential", anisotropy=False),
                     should_stop=lambda: True)


def test_too_few_detected_values_are_refused_with_advice():
    censored = np.ones(len(XY), dtype=bool)
    censored[:2] = False
    with pytest.raises(FieldcastError, match="at least 3 detected values"):
        fit_censored(XY, VALUES, censored, FitOptions())
