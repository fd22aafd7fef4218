"""The trend estimated once from all samples and local kriging of its residuals (Meuse data and bordered systems)."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import linalg

from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.predict.global_trend import estimate_trend
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.predict.local import LocalKrigingPredictor
from reference import MEUSE_LOG_ZINC

KINDS = ("linear", "quadratic")


@pytest.fixture(scope="module")
def log_zinc(meuse):
    return np.log(meuse.zinc)


def bordered_universal_kriging(xy, values, model, design, xy0, design0):
    """Universal kriging by solving the bordered (Lagrange) system for each target directly.

    Cressie 1993, Statistics for Spatial Data, rev. ed., section 3.4: [[K, F], [F^T, 0]] [lambda; nu] = [c0; f0],
    prediction lambda^T y and variance C(0) - lambda^T c0 - nu^T f0. Independent of the engine's algebra.
    """
    n, p = design.shape
    system = np.zeros((n + p, n + p))
    system[:n, :n] = model.data_covariance(xy)
    system[:n, n:] = design
    system[n:, :n] = design.T
    right = np.vstack([model.cross_covariance(xy, xy0), design0.T])
    solution = linalg.solve(system, right)
    weights, multipliers = solution[:n], solution[n:]
    variance = model.field_variance - np.sum(weights * right[:n], axis=0) - np.sum(multipliers * design0.T, axis=0)
    return weights.T @ values, variance


@pytest.mark.parametrize("kind", KINDS)
def test_every_sample_as_neighbourhood_is_universal_kriging(meuse, meuse_grid, log_zinc, kind):
    # Identity (Cressie 1993, section 3.4): simple kriging of the GLS residuals plus f0^T beta, with the variance term
    # g^T V_beta g, is universal kriging when the neighbourhood holds every sample. Checked against the global
    # predictor and against the bordered system solved directly, at every 10th grid cell.
    mean = MeanModel.for_data(kind, meuse.xy)
    targets = meuse_grid.xy[::10]
    trend = estimate_trend(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean)
    local = LocalKrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean, neighbours=len(log_zinc), trend=trend)
    predicted, variance = local.predict(targets)
    expected, expected_variance = KrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean).predict(targets)
    bordered, bordered_variance = bordered_universal_kriging(meuse.xy, log_zinc, MEUSE_LOG_ZINC,
                                                             mean.design(meuse.xy), targets, mean.design(targets))
    for reference_mean, reference_variance in ((expected, expected_variance), (bordered, bordered_variance)):
        np.testing.assert_allclose(predicted, reference_mean, rtol=0, atol=1e-8)
        np.testing.assert_allclose(variance, reference_variance, rtol=0, atol=1e-8)


def test_covariates_with_every_sample_as_neighbourhood_are_global_kriging(meuse, meuse_grid, log_zinc):
    # Same identity with external drift: the square root of the distance to the river, published with the data.
    mean = MeanModel.for_data("linear", meuse.xy, ("sqrt_dist",))
    covariate, covariate0 = np.sqrt(meuse.dist), np.sqrt(meuse_grid.dist)
    trend = estimate_trend(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean, covariate)
    local = LocalKrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean, neighbours=len(log_zinc),
                                  covariates=covariate, trend=trend)
    predicted, variance = local.predict(meuse_grid.xy, covariate0)
    expected, expected_variance = KrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean, covariate).predict(
        meuse_grid.xy, covariate0)
    np.testing.assert_allclose(predicted, expected, rtol=0, atol=1e-8)
    np.testing.assert_allclose(variance, expected_variance, rtol=0, atol=1e-8)


def test_exact_trend_is_the_gls_estimate_and_its_covariance(meuse, log_zinc):
    # GLS (Cressie 1993, section 3.4): beta = (F^T K^-1 F)^-1 F^T K^-1 y and V_beta = (F^T K^-1 F)^-1, here with
    # scipy's dense solve; the standard errors are sqrt(diag(V_beta)).
    mean = MeanModel.for_data("quadratic", meuse.xy)
    design = mean.design(meuse.xy)
    precision_design = linalg.solve(MEUSE_LOG_ZINC.data_covariance(meuse.xy), design)
    covariance = np.linalg.inv(design.T @ precision_design)
    trend = estimate_trend(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean)
    assert trend.method == "exact"
    np.testing.assert_allclose(trend.coefficient_covariance, covariance, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(trend.coefficients[:, 0], covariance @ precision_design.T @ log_zinc, rtol=1e-9)
    np.testing.assert_allclose(trend.standard_errors, np.sqrt(np.diag(covariance)), rtol=1e-9)


def test_vecchia_trend_with_every_previous_sample_is_exact(meuse, log_zinc):
    # Vecchia (1988): conditioning each sample on all earlier ones is the exact factorisation of the joint density,
    # so beta and V_beta are the exact GLS ones.
    mean = MeanModel.for_data("linear", meuse.xy)
    exact = estimate_trend(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean)
    vecchia = estimate_trend(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean, exact_limit=10,
                             vecchia_neighbours=len(log_zinc) - 1)
    assert vecchia.method == "Vecchia"
    np.testing.assert_allclose(vecchia.coefficients, exact.coefficients, rtol=1e-7, atol=1e-9)
    np.testing.assert_allclose(vecchia.coefficient_covariance, exact.coefficient_covariance, rtol=1e-7, atol=1e-12)


def test_vecchia_trend_with_few_neighbours_is_close(meuse, log_zinc):
    # With 30 previous neighbours the approximation is close (Datta et al. 2016, JASA 111(514), find 15-25 enough in
    # their examples; from memory): coefficients within a tenth of their standard error, errors within 10 %.
    mean = MeanModel.for_data("linear", meuse.xy)
    exact = estimate_trend(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean)
    vecchia = estimate_trend(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean, exact_limit=10, vecchia_neighbours=30)
    assert np.all(np.abs(vecchia.coefficients[:, 0] - exact.coefficients[:, 0]) < 0.1 * exact.standard_errors)
    np.testing.assert_allclose(vecchia.standard_errors, exact.standard_errors, rtol=0.1)


def test_global_trend_variance_exceeds_simple_kriging_of_the_residuals(meuse, meuse_grid, log_zinc):
    # The trend's estimation error adds g^T V_beta g >= 0 (V_beta positive definite) to the simple-kriging
    # variance of the residuals (Cressie 1993, section 3.4), so at k = 16 it is never below it.
    mean = MeanModel.for_data("linear", meuse.xy)
    trend = estimate_trend(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean)
    residual = log_zinc - mean.design(meuse.xy) @ trend.coefficients[:, 0]
    local = LocalKrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean, neighbours=16, trend=trend)
    simple = LocalKrigingPredictor(meuse.xy, residual, MEUSE_LOG_ZINC, MeanModel("known"), neighbours=16)
    predicted, variance = local.predict(meuse_grid.xy)
    residual_mean, residual_variance = simple.predict(meuse_grid.xy)
    np.testing.assert_allclose(predicted, residual_mean + mean.design(meuse_grid.xy) @ trend.coefficients[:, 0],
                               rtol=0, atol=1e-10)
    assert np.all(variance >= residual_variance - 1e-12)
    assert np.any(variance > residual_variance + 1e-4)


def test_sector_search_takes_the_nearest_samples_of_each_sector(meuse, meuse_grid, log_zinc):
    # Sector search (common practice): of the 8 * 16 nearest candidates, the 2 nearest in each of 8 equal angular
    # sectors come first. Checked by brute force with numpy's sort on the isotropic Meuse model, whose search frame
    # is (northing, easting): the major axis of azimuth 0 points north. Each target searches its own
    # (tile_spacings=None); tests/predict/test_neighbourhood.py checks the shared sets.
    mean = MeanModel.for_data("linear", meuse.xy)
    trend = estimate_trend(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean)
    local = LocalKrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean, neighbours=16, trend=trend, sectors=8,
                                  tile_spacings=None)
    targets = meuse_grid.xy[::50]
    indices, weights = local.weights(targets)
    assert np.all(np.isfinite(weights))
    for target, chosen in zip(targets, indices):
        offsets = meuse.xy - target
        distance = np.hypot(*offsets.T)
        pool = np.argsort(distance, kind="stable")[:128]
        sector = np.minimum(((np.arctan2(offsets[pool, 0], offsets[pool, 1]) + np.pi) / (np.pi / 4)).astype(int), 7)
        expected = {int(j) for s in range(8) for j in pool[sector == s][:2]}
        assert expected <= set(chosen.tolist())


@pytest.mark.parametrize("neighbours", [12, 20])
def test_sector_search_fills_the_other_slots_with_the_nearest_remaining_candidates(meuse, meuse_grid, log_zinc,
                                                                                     neighbours):
    # The whole sector rule (common practice), by brute force over the 8 * k nearest candidates: the k // 8 nearest
    # in each sector, then the nearest of the rest up to k. Cells on the grid's edge leave sectors short within the
    # shorter first candidate list, so both the short and the full search are exercised.
    mean = MeanModel.for_data("linear", meuse.xy)
    local = LocalKrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean, neighbours=neighbours, sectors=8,
                                  trend=estimate_trend(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean), tile_spacings=None)
    indices, _ = local.weights(meuse_grid.xy[::7])
    for target, chosen in zip(meuse_grid.xy[::7], indices):
        offsets = meuse.xy - target
        pool = np.argsort(np.hypot(*offsets.T), kind="stable")[:8 * neighbours]
        sector = np.minimum(((np.arctan2(offsets[pool, 0], offsets[pool, 1]) + np.pi) / (np.pi / 4)).astype(int), 7)
        first = [int(j) for s in range(8) for j in pool[sector == s][:neighbours // 8]]
        rest = [int(j) for j in pool if int(j) not in first][:neighbours - len(first)]
        assert set(chosen.tolist()) == set(first + rest)
