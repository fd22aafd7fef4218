"""fieldcast:proposesamples through processing.run on the published Meuse data, against the engine and refits.

Data: the Meuse topsoil samples (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp package;
tests/data/README.md), EPSG:28992 metres. The region is a rectangle over part of the study area.
"""
from __future__ import annotations

import numpy as np
import pytest
from qgis.core import QgsFeature, QgsGeometry, QgsProcessingException, QgsVectorLayer

from fieldcast.algorithms.io.model_file import ModelDocument
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from qgis_support import CancelAfterFirstProgress, Log, fieldcast_plugin, point_layer, qgis_processing  # noqa: F401

FIT_SETTINGS = {"TRANSFORM": "log", "KERNEL": "spherical", "ANISOTROPY": False, "TREND": "constant",
                "METHOD": "reml"}
RECTANGLE = "POLYGON((179000 330500,180600 330500,180600 332500,179000 332500,179000 330500))"


def polygon_layer(wkt: str) -> QgsVectorLayer:
    """A memory layer of one polygon in EPSG:28992."""
    layer = QgsVectorLayer("Polygon?crs=EPSG:28992", "region", "memory")
    feature = QgsFeature()
    feature.setGeometry(QgsGeometry.fromWkt(wkt))
    layer.dataProvider().addFeatures([feature])
    return layer


@pytest.fixture(scope="module")
def meuse_model(qgis_processing, meuse, tmp_path_factory):  # noqa: F811
    folder = tmp_path_factory.mktemp("propose")
    samples = point_layer(meuse.xy, {"zinc": meuse.zinc})
    model = qgis_processing.run("fieldcast:fitmodel", {"INPUT": samples, "FIELD": "zinc", **FIT_SETTINGS,
                                                       "OUTPUT_MODEL": str(folder / "zinc.json")})["OUTPUT_MODEL"]
    return samples, model


def run(qgis_processing, meuse_model, path, feedback=None, **extra):  # noqa: F811
    samples, model = meuse_model
    parameters = {"INPUT": samples, "FIELD": "zinc", "MODEL": model, "REGION": polygon_layer(RECTANGLE),
                  "COUNT": 5, "OUTPUT": str(path), **extra}
    return qgis_processing.run("fieldcast:proposesamples", parameters, feedback=feedback)


def proposals(path) -> dict[str, list]:
    layer = QgsVectorLayer(str(path), "out", "ogr")
    assert layer.isValid() and layer.crs().authid() == "EPSG:28992"
    rows = list(layer.getFeatures())
    return {name: [feature[name] for feature in rows] for name in ("pick", "criterion", "x", "y")} | {
        "geometry": [(feature.geometry().asPoint().x(), feature.geometry().asPoint().y()) for feature in rows]}


def test_variance_proposals_lower_the_refitted_mean_variance_and_are_logged(qgis_processing, meuse_model, meuse,  # noqa: F811
                                                                            tmp_path):
    log = Log()
    result = run(qgis_processing, meuse_model, tmp_path / "new.gpkg", feedback=log)
    written = proposals(result["OUTPUT"])
    assert written["pick"] == [1, 2, 3, 4, 5]
    assert written["geometry"] == list(zip(written["x"], written["y"]))
    assert all(179000 <= x <= 180600 and 330500 <= y <= 332500 for x, y in written["geometry"])
    assert np.all(np.diff(written["criterion"]) < 0)
    # The last criterion is the mean variance over the region's lattice after refitting with all five places:
    # check against a refit at a fine independent lattice of the rectangle (cell centres, 50 m).
    document = ModelDocument.load(meuse_model[1])
    xs, ys = np.meshgrid(np.arange(179025.0, 180600, 50), np.arange(330525.0, 332500, 50))
    lattice = np.column_stack([xs.ravel(), ys.ravel()])
    values = np.log(meuse.zinc + document.transform.offset)
    before = KrigingPredictor(meuse.xy, values, document.covariance, document.mean).predict(lattice)[1].mean()
    added = np.array(written["geometry"])
    after = KrigingPredictor(np.vstack([meuse.xy, added]), np.r_[values, np.zeros(5)], document.covariance,
                             document.mean).predict(lattice)[1].mean()
    assert written["criterion"][-1] == pytest.approx(after, rel=0.02)
    assert after < before
    text = "\n".join(log.lines)
    assert "now" in text and "after the 5 proposals" in text and "exact for the model" in text
    assert "Access, safety and regulation come first" in text


def test_candidates_and_min_spacing_are_respected(qgis_processing, meuse_model, meuse, tmp_path):  # noqa: F811
    rng = np.random.default_rng(5)
    inside = np.column_stack([rng.uniform(179000, 180600, 300), rng.uniform(330500, 332500, 300)])
    outside = np.array([[182000.0, 330000.0], [178000.0, 333000.0]])
    candidates = point_layer(np.vstack([inside, outside]), {})
    log = Log()
    result = run(qgis_processing, meuse_model, tmp_path / "spaced.gpkg", feedback=log, CANDIDATES=candidates,
                 MIN_SPACING=200.0)
    chosen = np.array(proposals(result["OUTPUT"])["geometry"])
    assert all(np.any(np.all(np.isclose(inside, point), axis=1)) for point in chosen)
    gaps = np.hypot(*(chosen[:, None] - chosen[None]).transpose(2, 0, 1)) + np.eye(len(chosen)) * 1e9
    assert gaps.min() >= 200.0
    assert np.hypot(*(chosen[:, None] - meuse.xy[None]).transpose(2, 0, 1)).min() >= 200.0
    assert any("2 of 302 candidate places lie outside the region" in line for line in log.lines)


def test_classification_proposals_say_they_use_the_current_map(qgis_processing, meuse_model, tmp_path):  # noqa: F811
    log = Log()
    result = run(qgis_processing, meuse_model, tmp_path / "class.gpkg", feedback=log, CRITERION="classification",
                 THRESHOLD=500.0, COUNT=3)
    written = proposals(result["OUTPUT"])
    assert written["pick"] == [1, 2, 3] and np.all(np.diff(written["criterion"]) < 0)
    assert any("uses the current map" in line for line in log.lines)


@pytest.mark.parametrize(("extra", "message"), [
    ({"COUNT": 400, "CANDIDATES": "few"}, r"COUNT is 400 but there are only 3 candidate places.*Lower COUNT"),
    ({"REGION": "empty"}, r"holds no polygons.*polygon layer that outlines"),
    ({"CANDIDATES": "outside"}, r"lies inside REGION.*candidate places inside the region"),
    ({"CRITERION": "classification"}, r"needs a Threshold \(THRESHOLD.*CRITERION to variance"),
    ({"CRITERION": "classification", "THRESHOLD": -1.0}, r"minus the model's offset \(LOG_OFFSET\).*higher THRESHOLD"),
])
def test_bad_inputs_are_refused_with_advice_and_write_nothing(qgis_processing, meuse_model, tmp_path, extra,  # noqa: F811
                                                              message):
    layers = {"few": point_layer(np.array([[179500.0, 331000.0], [180000.0, 331500.0], [179200.0, 332000.0]]), {}),
              "outside": point_layer(np.array([[182000.0, 330000.0]]), {}),
              "empty": QgsVectorLayer("Polygon?crs=EPSG:28992", "nothing", "memory")}
    extra = {key: layers.get(value, value) if isinstance(value, str) else value for key, value in extra.items()}
    with pytest.raises(QgsProcessingException, match=message):
        run(qgis_processing, meuse_model, tmp_path / "refused.gpkg", **extra)
    assert list(tmp_path.iterdir()) == []


def test_cancel_leaves_no_output(qgis_processing, meuse_model, tmp_path):  # noqa: F811
    with pytest.raises(QgsProcessingException, match="Cancelled"):
        run(qgis_processing, meuse_model, tmp_path / "cancelled.gpkg", feedback=CancelAfterFirstProgress(21.0))
    assert list(tmp_path.iterdir()) == []


def test_more_samples_than_global_kriging_takes_are_refused_with_advice(qgis_processing, meuse_model, tmp_path):  # noqa: F811
    rng = np.random.default_rng(9)
    many = point_layer(np.column_stack([rng.uniform(178600, 181400, 5001), rng.uniform(329700, 333600, 5001)]),
                       {"zinc": rng.uniform(100, 1000, 5001)})
    with pytest.raises(QgsProcessingException, match=r"all 5,001 samples, more than 5,000.*fewer samples in INPUT"):
        run(qgis_processing, (many, meuse_model[1]), tmp_path / "many.gpkg")
    assert list(tmp_path.iterdir()) == []
