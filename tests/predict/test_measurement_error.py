"""Per-sample measurement-error variances in kriging: global, local and closed-form leave-one-out kriging equal
the bordered kriging system solved directly with the stated diagonal, and coincident samples merge to their
inverse-variance weighted mean.

The data are the published Meuse samples (Rikken & Van Rijn 1993); the error variances are a stated test diagonal
(Meuse publishes none), chosen to vary five-fold between samples so that a homoscedastic computation would differ.
"""
from __future__ import annotations

import numpy as np
import pytest

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.io.samples import merge_coincident
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.predict.crossval import leave_one_out, local_leave_one_out
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.predict.local import LocalKrigingPredictor
from reference import MEUSE_LOG_ZINC


def stated_diagonal(n: int) -> np.ndarray:
    """Error variances 0.02 to 0.10 (log units squared), cycling over the samples."""
    return 0.02 + 0.02 * (np.arange(n) % 5)


def bordered(xy, values, design, xy0, design0, error_variance):
    """Kriging mean and latent variance from the bordered (Lagrange) system, solved directly.

    Cressie 1993, Statistics for Spatial Data, sections 3.2 (ordinary) and 3.4 (universal kriging):
    [[K, F], [F^T, 0]] [lambda; m] = [c0; f0], mean = lambda^T y, variance = C(0) - lambda^T c0 - m^T f0, with
    K = C + diag(nugget + e) the covariance of the observations and c0 the covariance of the true value at the
    target with them.
    """
    model = MEUSE_LOG_ZINC
    k = model.cross_covariance(xy, xy) + np.diag(model.nugget + error_variance)
    p = design.shape[1]
    system = np.block([[k, design], [design.T, np.zeros((p, p))]])
    cross = model.cross_covariance(xy, xy0)
    solution = np.linalg.solve(system, np.vstack([cross, design0.T]))
    weights, multipliers = solution[: len(xy)], solution[len(xy):]
    variance = model.field_variance - np.sum(weights * cross, axis=0) - np.sum(multipliers * design0.T, axis=0)
    return weights.T @ values, variance


@pytest.fixture(scope="module")
def data(meuse):
    return np.asarray(meuse.xy), np.log(meuse.zinc), stated_diagonal(len(meuse.zinc))


@pytest.mark.parametrize("kind", ["constant", "linear"])
def test_global_kriging_equals_the_bordered_system_with_the_stated_diagonal(data, meuse_grid, kind):
    xy, values, error_variance = data
    mean_model = MeanModel.for_data(kind, xy)
    xy0 = meuse_grid.xy[::13]
    mean, variance = KrigingPredictor(xy, values, MEUSE_LOG_ZINC, mean_model,
                                      error_variance=error_variance).predict(xy0)
    expected_mean, expected_variance = bordered(xy, values, mean_model.design(xy), xy0, mean_model.design(xy0),
                                                error_variance)
    np.testing.assert_allclose(mean, expected_mean, rtol=0, atol=1e-10)
    np.testing.assert_allclose(variance, expected_variance, rtol=1e-9)
    homoscedastic, _ = KrigingPredictor(xy, values, MEUSE_LOG_ZINC, mean_model).predict(xy0)
    assert np.max(np.abs(homoscedastic - mean)) > 1e-3  # the diagonal matters


def test_true_value_at_a_sample_is_not_the_measurement(data):
    # With measurement error the kriging predictor of the true value smooths (Cressie 1993, section 3.2: only an
    # error-free datum is reproduced), and its variance at the sample stays below that datum's error variance.
    xy, values, error_variance = data
    mean, variance = KrigingPredictor(xy, values, MEUSE_LOG_ZINC, MeanModel.for_data("constant", xy),
                                      error_variance=error_variance).predict(xy[:20])
    assert np.all(np.abs(mean - values[:20]) > 0)
    assert np.all(variance < MEUSE_LOG_ZINC.nugget + error_variance[:20])


def test_local_kriging_equals_the_bordered_system_of_each_neighbourhood(data, meuse_grid):
    xy, values, error_variance = data
    mean_model = MeanModel.for_data("constant", xy)
    xy0 = meuse_grid.xy[::97]
    predictor = LocalKrigingPredictor(xy, values, MEUSE_LOG_ZINC, mean_model, neighbours=16,
                                      error_variance=error_variance)
    mean, variance = predictor.predict(xy0)
    sets, _ = predictor.weights(xy0)  # each target's neighbourhood (own or shared, tests/predict/test_neighbourhood.py)
    for j, target in enumerate(xy0):
        near = sets[j]
        local = MeanModel.for_data("constant", xy[near])
        expected_mean, expected_variance = bordered(xy[near], values[near], local.design(xy[near]), target[None],
                                                    local.design(target[None]), error_variance[near])
        np.testing.assert_allclose(mean[j], expected_mean[0], rtol=0, atol=1e-9)
        np.testing.assert_allclose(variance[j], expected_variance[0], rtol=1e-8)


def brute_force_leave_one_out(xy, values, error_variance, kind):
    """Each sample kriged from all others by the bordered system; variance of the error in predicting the
    observation: latent variance plus the nugget plus the sample's own error variance."""
    predicted, variance = np.empty(len(values)), np.empty(len(values))
    for i in range(len(values)):
        rest = np.arange(len(values)) != i
        mean_model = MeanModel.for_data(kind, xy[rest])
        mean, latent = bordered(xy[rest], values[rest], mean_model.design(xy[rest]), xy[i:i + 1],
                                mean_model.design(xy[i:i + 1]), error_variance[rest])
        predicted[i], variance[i] = mean[0], latent[0] + MEUSE_LOG_ZINC.nugget + error_variance[i]
    return predicted, variance


def test_closed_form_leave_one_out_stays_exact_with_a_heteroscedastic_diagonal(data):
    # Dubrule 1983 (Math. Geol. 15(6)): e_i = (Q y)_i / Q_ii, var_i = 1 / Q_ii from the partitioned inverse of the
    # kriging matrix, which holds for any positive definite K; checked against refitting without each sample.
    xy, values, error_variance = data
    result = leave_one_out(xy, values, MEUSE_LOG_ZINC, MeanModel.for_data("linear", xy),
                           error_variance=error_variance)
    predicted, variance = brute_force_leave_one_out(xy, values, error_variance, "linear")
    np.testing.assert_allclose(result.predicted, predicted, rtol=0, atol=1e-9)
    np.testing.assert_allclose(result.variance, variance, rtol=1e-9)


def test_local_leave_one_out_with_all_others_is_the_brute_force_one(data):
    xy, values, error_variance = data
    result = local_leave_one_out(xy, values, MEUSE_LOG_ZINC, MeanModel.for_data("constant", xy),
                                 neighbours=len(values) - 1, error_variance=error_variance)
    predicted, variance = brute_force_leave_one_out(xy, values, error_variance, "constant")
    np.testing.assert_allclose(result.predicted, predicted, rtol=0, atol=1e-8)
    np.testing.assert_allclose(result.variance, variance, rtol=1e-8)


def test_coincident_samples_merge_to_the_inverse_variance_weighted_mean():
    # Independent measurements y_i of one value with variances e_i: the best linear unbiased estimate is
    # sum(y_i / e_i) / sum(1 / e_i), with variance 1 / sum(1 / e_i) (the inverse-variance weighted mean; from
    # memory). Invented values for the formula.
    xy = np.array([[0.0, 0.0], [0.0, 0.0], [5.0, 5.0], [9.0, 1.0], [9.0, 1.0]])
    values = np.array([1.0, 4.0, 2.0, 3.0, 7.0])
    error_variance = np.array([0.1, 0.4, 0.2, 0.0, 0.5])
    merged = merge_coincident(xy, values, error_variance=error_variance)
    np.testing.assert_allclose(merged.values, [(1 / 0.1 + 4 / 0.4) / (1 / 0.1 + 1 / 0.4), 2.0, 3.0])
    np.testing.assert_allclose(merged.error_variance, [1 / (1 / 0.1 + 1 / 0.4), 0.2, 0.0])
    assert merged.merged_groups == 2 and merged.merged_points == 4


@pytest.mark.parametrize("bad", [np.array([0.1, -0.2, 0.1]), np.array([0.1, np.nan, 0.1]), np.ones(2)])
def test_unusable_error_variances_are_refused_with_advice(bad):
    xy = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]])
    with pytest.raises(FieldcastError, match="variance") as error:
        KrigingPredictor(xy, np.array([1.0, 2.0, 3.0]), MEUSE_LOG_ZINC, MeanModel.for_data("constant", xy),
                         error_variance=bad)
    assert "Expected one" in str(error.value) or "give every sample a variance of 0 or more" in str(error.value)
