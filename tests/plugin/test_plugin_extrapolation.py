"""What 'Predict surface' says about cells beyond its samples and its model, and the distance raster.

Data: the published Meuse topsoil samples (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp package;
tests/data/README.md), EPSG:28992 metres, log(zinc) with the exponential model the neighbourhood tests fit. The
algorithm runs in-process through ``processing.run``; counts are checked against the written rasters and scipy.
"""
from __future__ import annotations

import re

import numpy as np
import pytest
from qgis.core import QgsProcessingException, QgsProcessingFeedback
from scipy.spatial.distance import cdist

from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.predict.extrapolation import TAIL_SDS
from fieldcast.algorithms.predict.local import LocalKrigingPredictor
from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures
from test_plugin_neighbours import gaussian_model_file, predict, read_band, zinc  # noqa: F401 - zinc is a fixture


def count(pattern: str, log: str) -> int:
    """The number (with thousands commas) that ``pattern``'s first group finds in ``log``."""
    return int(re.search(pattern, log).group(1).replace(",", ""))


def test_local_predictions_outside_the_model_are_nodata_with_advice(qgis_processing, zinc, meuse):  # noqa: F811
    # The case of the issue: a Gaussian correlation without nugget, range 1,000 m, 16 neighbours; the systems are
    # well conditioned (tests/predict/test_factorisation_policy.py), yet the means reach far outside the data.
    document, path = gaussian_model_file(zinc, 1000.0, "gaussian16.json")
    feedback = QgsProcessingFeedback()
    prediction, variance, centres = predict(qgis_processing, (zinc[0], path, zinc[2]), "gaussian16", feedback,
                                            NEIGHBOURS=16)
    values = np.log(meuse.zinc)
    engine = LocalKrigingPredictor(meuse.xy, values, document.covariance, MeanModel.for_data("constant", meuse.xy),
                                   neighbours=16)
    mean, _ = engine.predict(centres)
    # The model's mean by least squares is the sample mean; 6 standard deviations are a 2e-9 normal tail.
    outside = np.abs(mean - values.mean()) > TAIL_SDS * np.sqrt(document.covariance.sill)
    log = feedback.textLog()
    assert outside.sum() > 0
    assert count(r"zinc: ([0-9,]+) cell\(s\) are nodata: their kriging prediction lies more than 6 standard", log) \
        == outside.sum()
    assert "KERNEL" in log and "NEIGHBOURS" in log  # the advice names parameters that exist
    assert np.all(np.isnan(prediction[outside])) and np.all(np.isnan(variance[outside]))
    written = prediction[np.isfinite(prediction)]
    assert np.all(np.abs(np.log(written) - values.mean()) <= TAIL_SDS * np.sqrt(document.covariance.sill))


def test_the_whole_extent_logs_its_extrapolation_and_writes_distances(qgis_processing, zinc, meuse):  # noqa: F811
    feedback = QgsProcessingFeedback()
    prediction, _, centres = predict(qgis_processing, zinc, "whole", feedback, OUTPUT_DISTANCE=str(zinc[2] / "d.tif"))
    distance = read_band(str(zinc[2] / "d.tif")).astype(float).ravel()
    nearest = cdist(centres, meuse.xy).min(axis=1)  # scipy brute force: every cell to every sample
    np.testing.assert_allclose(distance, nearest, rtol=1e-6)
    log = feedback.textLog()
    below = np.count_nonzero(prediction < meuse.zinc.min())
    above = np.count_nonzero(prediction > meuse.zinc.max())
    assert above > 0
    assert (f"zinc: {below + above:,} mapped cells ({(below + above) / len(prediction):.1%}) are predicted outside "
            f"the range of the samples (113 to 1839): {below:,} below, {above:,} above") in log
    assert re.search(r"[0-9,]+ of [0-9,]+ mapped cells \([0-9.]+%\) lie farther than the model's effective range", log)


def test_the_default_hull_maps_fewer_cells_outside_the_data(qgis_processing, zinc, meuse):  # noqa: F811
    whole, _, centres = predict(qgis_processing, zinc, "extent")
    feedback = QgsProcessingFeedback()
    near, _, _ = predict(qgis_processing, zinc, "hull", feedback, MAP_AREA="hull")
    mapped = np.isfinite(near)
    assert 0 < mapped.sum() < len(near)
    np.testing.assert_array_equal(near[mapped], whole[mapped])
    # Every sample lies in its convex hull, so a cell farther than the margin from the hull is farther than the
    # margin from every sample; the default margin is the median nearest-neighbour distance.
    margin = float(re.search(r"lie within ([0-9.]+) metre of the samples' convex hull", feedback.textLog()).group(1))
    assert margin == pytest.approx(np.median(np.sort(cdist(meuse.xy, meuse.xy), axis=1)[:, 1]), rel=1e-3)
    assert cdist(centres[~mapped], meuse.xy).min() > margin
    assert np.count_nonzero(near > meuse.zinc.max()) < np.count_nonzero(whole > meuse.zinc.max())


def test_fitmodel_warns_when_the_range_runs_past_the_study(qgis_processing, meuse, tmp_path):  # noqa: F811
    # The constant-mean exponential REML fit of Meuse log-zinc (tests/fit/test_range_check.py).
    feedback = QgsProcessingFeedback()
    qgis_processing.run("fieldcast:fitmodel", {
        "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", "TRANSFORM": "log",
        "KERNEL": "exponential", "ANISOTROPY": False, "TREND": "constant", "METHOD": "reml",
        "OUTPUT_MODEL": str(tmp_path / "zinc.json")}, feedback=feedback)
    assert re.search(r"The fitted effective range \([0-9,]+ metre\) exceeds the study size \(4,441 metre",
                     feedback.textLog())
    assert "refit with TREND = linear or quadratic" in feedback.textLog()


def test_hull_margin_is_used_with_the_hull_and_said_to_be_ignored_without(qgis_processing, zinc, meuse):  # noqa: F811
    feedback = QgsProcessingFeedback()
    near, _, centres = predict(qgis_processing, zinc, "margin", feedback, MAP_AREA="hull", HULL_MARGIN=50.0)
    assert "lie within 50 metre of the samples' convex hull" in feedback.textLog()
    assert cdist(centres[np.isnan(near)], meuse.xy).min() > 50.0  # every sample lies inside its hull
    feedback = QgsProcessingFeedback()
    whole, _, _ = predict(qgis_processing, zinc, "ignored", feedback, HULL_MARGIN=50.0)
    assert "HULL_MARGIN is ignored: MAP_AREA is extent" in feedback.textLog() and np.isfinite(whole).all()


def test_a_distance_raster_on_the_prediction_is_refused_before_any_work(qgis_processing, zinc):  # noqa: F811
    layer, model, folder = zinc
    target = folder / "clash.tif"
    with pytest.raises(QgsProcessingException, match="OUTPUT and OUTPUT_DISTANCE are the same file"):
        qgis_processing.run("fieldcast:predict", {"INPUT": layer, "FIELD": "zinc", "MODEL": model,
                                                  "OUTPUT": str(target), "OUTPUT_DISTANCE": str(target)})
    assert not target.exists()
