"""Local leave-one-out cross-validation on the published Meuse data, against global closed form and brute force.

Data: the published Meuse topsoil samples (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp package;
tests/data/README.md), EPSG:28992 metres, log(zinc).
"""
from __future__ import annotations

import numpy as np
import pytest

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.fit.fitting import fit_model
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure, search_frame
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.predict.crossval import leave_one_out, local_leave_one_out
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from reference import calibrated_msdr_range

SUBSET = slice(0, 155, 3)  # 52 Meuse samples keep the brute-force refits quick
# Anisotropic Matérn 3/2 model with a nugget (invented parameters of the Meuse magnitudes; only an input here).
MODEL = CovarianceModel((Structure("matern32", 0.5, 600.0, azimuth=45.0, ratio=0.7),), 0.06)


@pytest.fixture(scope="module")
def data(meuse):
    """Meuse samples of the subset: coordinates, log-zinc."""
    return meuse.xy[SUBSET], np.log(meuse.zinc[SUBSET])


def mean_model(kind, xy):
    return MeanModel.for_data(kind, xy, known_value=5.9)


@pytest.mark.parametrize("kind", ["known", "constant", "linear"])
def test_all_other_samples_as_neighbours_is_the_closed_form(data, kind):
    # Dubrule 1983 (Math. Geol. 15(6), 687-699): the closed form equals kriging each sample from all the others,
    # trend re-estimated, nugget in the error variance; local kriging with k = n - 1 solves that same system.
    xy, values = data
    expected = leave_one_out(xy, values, MODEL, mean_model(kind, xy))
    local = local_leave_one_out(xy, values, MODEL, mean_model(kind, xy), neighbours=len(values) - 1)
    np.testing.assert_allclose(local.predicted, expected.predicted, rtol=0, atol=1e-9)
    np.testing.assert_allclose(local.variance, expected.variance, rtol=1e-9)
    np.testing.assert_allclose(local.standardized, expected.standardized, rtol=0, atol=1e-7)
    assert local.summary() == pytest.approx(expected.summary(), rel=1e-8, abs=1e-12)


@pytest.mark.parametrize("kind", ["known", "constant", "linear"])
def test_each_sample_is_kriging_on_its_nearest_other_samples(data, kind):
    # Brute force by definition: rank the other samples by the model's anisotropic scaled distance (the search
    # ellipse), keep the 7 nearest within 500 m along the major axis, krige the sample from those alone with the
    # global predictor (nugget included: the observation is predicted).
    xy, values = data
    k, radius = 7, 500.0
    mean = mean_model(kind, xy)
    result = local_leave_one_out(xy, values, MODEL, mean, neighbours=k, search_radius=radius)
    frame = search_frame(MODEL.structures[0], xy)
    unresolved = 0
    for i in range(len(values)):
        distance = np.hypot(*(frame - frame[i]).T)
        distance[i] = np.inf
        chosen = np.argsort(distance, kind="stable")[:k]
        chosen = chosen[distance[chosen] < radius]
        if len(chosen) < mean.n_terms + 1:
            assert np.isnan(result.predicted[i]) and np.isnan(result.variance[i])
            unresolved += 1
            continue
        predicted, variance = KrigingPredictor(xy[chosen], values[chosen], MODEL, mean).predict(
            xy[i:i + 1], include_nugget=True)
        assert result.predicted[i] == pytest.approx(predicted[0], abs=1e-9)
        assert result.variance[i] == pytest.approx(variance[0], rel=1e-9)
    assert 0 < unresolved < len(values)  # the radius leaves some isolated samples out
    assert result.summary()["n"] == len(values) - unresolved
    resolved = result.resolved()
    assert len(resolved.residual) == len(values) - unresolved
    assert result.summary()["RMSE"] == pytest.approx(np.sqrt(np.mean(resolved.residual ** 2)))


def test_meuse_log_zinc_with_32_neighbours_predicts_well(meuse):
    # Acceptance numbers of the cross-validation issue: global leave-one-out of log zinc with a fitted spherical
    # model must reach RMSE < 0.40; 32 neighbours (common practice: 16 to 64) may do slightly worse, so the bound
    # here is 0.45 (common practice, not a published figure). MSDR within the 99.9 % chi-square interval of a
    # right model (calibrated_msdr_range: 0.67..1.42 for 155 errors).
    values = np.log(meuse.zinc)
    fit = fit_model(meuse.xy, values, kernel="spherical", mean="constant")
    result = local_leave_one_out(meuse.xy, values, fit.covariance, fit.mean, neighbours=32)
    summary = result.summary()
    assert summary["n"] == 155
    assert summary["RMSE"] < 0.45
    low, high = calibrated_msdr_range(summary["n"])
    assert low < summary["MSDR"] < high


def test_a_sample_is_not_its_own_neighbour(data):
    # Shifting one sample's value must not change its own leave-one-out prediction (it is not its own neighbour).
    xy, values = data
    shifted = values.copy()
    shifted[10] += 5.0
    mean = mean_model("constant", xy)
    before = local_leave_one_out(xy, values, MODEL, mean, neighbours=6)
    after = local_leave_one_out(xy, shifted, MODEL, mean, neighbours=6)
    assert after.predicted[10] == pytest.approx(before.predicted[10], abs=1e-12)
    assert after.residual[10] == pytest.approx(before.residual[10] + 5.0, abs=1e-12)


@pytest.mark.parametrize("neighbours, message", [(1, "at least 2"), (2.5, "whole number")])
def test_too_few_neighbours_are_refused(data, neighbours, message):
    xy, values = data
    with pytest.raises(FieldcastError, match=message):
        local_leave_one_out(xy, values, MODEL, mean_model("constant", xy), neighbours=neighbours)


def test_too_few_samples_are_refused(data):
    xy, values = data
    with pytest.raises(FieldcastError, match="needs at least 3 samples"):
        local_leave_one_out(xy[:2], values[:2], MODEL, mean_model("constant", xy), neighbours=2)

