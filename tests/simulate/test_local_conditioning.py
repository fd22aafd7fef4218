"""Sparse local kriging weights reproduce local kriging (the weights local conditional simulation uses)."""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from fieldcast.algorithms.model.covariance import CovarianceModel
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.predict.local import LocalKrigingPredictor
from reference import MEUSE_LOG_ZINC

# Anisotropic variant (azimuth 40, ratio 0.5) to exercise the search frame.
ANISOTROPIC = CovarianceModel((replace(MEUSE_LOG_ZINC.structures[0], azimuth=40.0, ratio=0.5),), MEUSE_LOG_ZINC.nugget)


@pytest.fixture(scope="module")
def meuse_log_zinc(meuse):
    return np.asarray(meuse.xy), np.log(meuse.zinc)


@pytest.mark.parametrize("kind, model", [("known", MEUSE_LOG_ZINC), ("constant", ANISOTROPIC),
                                         ("linear", MEUSE_LOG_ZINC)])
def test_weights_reproduce_the_local_prediction(meuse_log_zinc, meuse_grid, kind, model):
    # The kriging mean is linear in the data, mean(x0) = sum lambda (y - m) + m with m the known mean of simple
    # kriging and 0 otherwise (Cressie 1993, Statistics for Spatial Data, 3.2 and 3.4); Meuse data and its
    # published 40 m grid (Rikken & Van Rijn 1993).
    xy, values = meuse_log_zinc
    mean_model = MeanModel.for_data(kind, xy, known_value=float(values.mean()) if kind == "known" else 0.0)
    local = LocalKrigingPredictor(xy, values, model, mean_model, neighbours=20)
    targets = np.asarray(meuse_grid.xy)[::3]
    indices, weights = local.weights(targets)
    assert indices.shape == weights.shape == (len(targets), 20)
    assert local.last_unresolved == 0
    known = mean_model.known_mean(1)[0]
    expected, _ = local.predict(targets)
    np.testing.assert_allclose(np.sum(weights * (values[indices] - known), axis=1) + known, expected,
                               rtol=1e-9, atol=1e-9)
    if kind != "known":
        # Unbiasedness: the weights of ordinary and universal kriging sum to one (Cressie 1993, 3.2).
        np.testing.assert_allclose(weights.sum(axis=1), 1.0, atol=1e-9)
    assert np.all(np.diff(indices, axis=1) > 0)  # distinct neighbours, one slot each


def test_all_samples_as_neighbours_give_the_global_weights(meuse_log_zinc, meuse_grid):
    # With every sample in each neighbourhood the local system is the global one (Cressie 1993, 3.2), so the
    # scattered sparse weights equal the dense weights of the global predictor.
    xy, values = meuse_log_zinc
    mean_model = MeanModel.for_data("constant", xy)
    targets = np.asarray(meuse_grid.xy)[::50]
    indices, weights = LocalKrigingPredictor(xy, values, MEUSE_LOG_ZINC, mean_model,
                                             neighbours=len(xy)).weights(targets)
    dense = np.zeros((len(targets), len(xy)))
    np.put_along_axis(dense, indices, weights, axis=1)
    np.testing.assert_allclose(dense, KrigingPredictor(xy, values, MEUSE_LOG_ZINC, mean_model).weights(targets).T,
                               atol=1e-9)


def test_targets_beyond_the_search_radius_are_marked(meuse_log_zinc):
    # A 300 m search leaves a far target with no sample: NaN weights in every slot, as predict gives NaN.
    xy, values = meuse_log_zinc
    mean_model = MeanModel.for_data("constant", xy)
    local = LocalKrigingPredictor(xy, values, MEUSE_LOG_ZINC, mean_model, neighbours=8, search_radius=300.0)
    targets = np.vstack([xy[:3] + 10.0, [[170000.0, 320000.0]]])
    indices, weights = local.weights(targets)
    assert local.last_unresolved == 1
    assert np.isnan(weights[3]).all() and np.isfinite(weights[:3]).all()
    expected, _ = local.predict(targets)
    resolved = np.sum(weights[:3] * values[indices[:3]], axis=1)
    np.testing.assert_allclose(resolved, expected[:3], rtol=1e-9)
    assert np.isnan(expected[3])
