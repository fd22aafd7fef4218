"""PREDICT_TARGET: a new measurement's error variance is the true value's plus the nugget and its own error.

Cressie 1993, Statistics for Spatial Data, section 3.2 (ordinary kriging; where it treats measurement error is
from memory): the prediction of a new measurement Z(x0) = S(x0) + e0, e0 independent of the data, has the same
weights as that of S(x0) and error variance var(S) + var(e0). Data:
the published Meuse samples (Rikken & Van Rijn 1993); error variances a stated test diagonal.
"""
from __future__ import annotations

import numpy as np
import pytest

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.grid_surfaces import SurfaceScale, cell_predictor, predict_points
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.predict.target import measurement_variance, target_words
from reference import MEUSE_LOG_ZINC


@pytest.fixture(scope="module")
def case(meuse, meuse_grid):
    xy, values = np.asarray(meuse.xy), np.log(meuse.zinc)
    error_variance = 0.01 + 0.02 * (np.arange(len(values)) % 5)
    predictor = KrigingPredictor(xy, values, MEUSE_LOG_ZINC, MeanModel.for_data("constant", xy),
                                 error_variance=error_variance)
    return predictor, error_variance, meuse_grid.xy[::50]


def test_a_new_measurement_adds_the_nugget_and_the_median_error_variance(case):
    predictor, error_variance, targets = case
    added = measurement_variance("measurement", MEUSE_LOG_ZINC, error_variance)
    assert added == pytest.approx(MEUSE_LOG_ZINC.nugget + np.median(error_variance))
    assert measurement_variance("true", MEUSE_LOG_ZINC, error_variance) is None
    assert measurement_variance("measurement", MEUSE_LOG_ZINC) == MEUSE_LOG_ZINC.nugget  # as include_nugget
    predict = cell_predictor(predictor)
    true = predict_points(predict, targets, SurfaceScale(Transform()), ["prediction", "variance"])
    new = predict_points(predict, targets, SurfaceScale(Transform(), measurement_variance=added),
                         ["prediction", "variance"])
    np.testing.assert_allclose(new.layers[0]["prediction"], true.layers[0]["prediction"], rtol=0, atol=0)
    np.testing.assert_allclose(new.layers[0]["variance"], true.layers[0]["variance"] + added, rtol=1e-12)
    _, latent = predictor.predict(targets, include_nugget=True)
    np.testing.assert_allclose(new.layers[0]["variance"] - np.median(error_variance), latent, rtol=1e-12)


def test_the_words_say_what_the_variances_are_of(case):
    _, error_variance, _ = case
    added = measurement_variance("measurement", MEUSE_LOG_ZINC, error_variance)
    assert "leave out the nugget and the samples' error variances" in target_words(None, error_variance)
    assert f"{added:.4g}" in target_words(added, error_variance)
    descriptions = SurfaceScale(Transform(), measurement_variance=added).descriptions("zinc")
    assert "of a new measurement" in descriptions["variance"] and "nugget excluded" not in descriptions["sd"]
    assert "nugget excluded" in SurfaceScale(Transform()).descriptions("zinc")["variance"]


def test_a_new_measurement_of_a_cell_average_and_unknown_targets_are_refused():
    with pytest.raises(FieldcastError, match="set SUPPORT to point"):
        measurement_variance("measurement", MEUSE_LOG_ZINC, support="cell")
    with pytest.raises(FieldcastError, match="PREDICT_TARGET must be one of true, measurement"):
        measurement_variance("observation", MEUSE_LOG_ZINC)
