"""Box-Cox and normal-score models through the toolbox on the published Meuse data (Rikken & Van Rijn 1993, as
shipped in Debian's r-cran-sp package; tests/data/README.md): recorded in the model file, applied by predict."""
from __future__ import annotations

import json

import numpy as np
import pytest
from osgeo import gdal
from qgis.core import QgsProcessingException, QgsVectorLayer
from scipy import stats

from fieldcast.algorithms.fit.declustering import decluster
from fieldcast.algorithms.fit.options import FitOptions
from fieldcast.algorithms.fit.transform_fit import boxcox_profile
from fieldcast.algorithms.io.model_file import ModelDocument
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.crossval import leave_one_out
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures
from test_plugin_predictpoints import Log, labelled_layer

SETTINGS = {"KERNEL": "spherical", "ANISOTROPY": False, "TREND": "constant", "METHOD": "reml"}


def fit(qgis_processing, meuse, path, feedback=None, **transform):  # noqa: F811
    return qgis_processing.run("fieldcast:fitmodel", {
        "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", **SETTINGS, **transform,
        "OUTPUT_MODEL": str(path)}, feedback=feedback)


def test_normal_score_model_round_trip_through_predictpoints(qgis_processing, meuse, tmp_path):  # noqa: F811
    log = Log()
    model = fit(qgis_processing, meuse, tmp_path / "zinc.json", log, TRANSFORM="normalscore",
                OUTPUT_REPORT=str(tmp_path / "fit.html"))["OUTPUT_MODEL"]
    assert "Declustering" in (tmp_path / "fit.html").read_text(encoding="utf-8")
    document = ModelDocument.load(model)
    # The knots are those of the engine's declustered normal scores of every sample (Deutsch & Journel 1998).
    assert document.transform == Transform.normal_score(meuse.zinc, decluster(meuse.xy, meuse.zinc).weights)
    assert json.loads((tmp_path / "zinc.json").read_text())["transform"]["tails"].startswith("linear in the tails")
    assert any(line.startswith("Cell declustering") for line in log.lines)
    targets = meuse.xy[:6] + 25.0
    result = qgis_processing.run("fieldcast:predictpoints", {
        "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", "MODEL": model,
        "TARGETS": labelled_layer(targets), "THRESHOLD": 500.0, "OUTPUT": str(tmp_path / "points.gpkg")})
    layer = QgsVectorLayer(result["OUTPUT"], "points", "ogr")
    estimates = np.array([feature["zinc_est"] for feature in layer.getFeatures()])
    exceedance = np.array([feature["zinc_pexc"] for feature in layer.getFeatures()])
    # The kriging system solved directly on the recorded transform's scores, back-transformed to the median
    # through the inverse; the exceedance of 500 ppm by the normal tail of the transformed threshold.
    scores = document.transform.forward(meuse.zinc)
    mean, variance = KrigingPredictor(meuse.xy, scores, document.covariance, document.mean).predict(targets)
    np.testing.assert_allclose(estimates, document.transform.back_median(mean), rtol=1e-6)
    level = document.transform.forward(np.array([500.0]))[0]
    np.testing.assert_allclose(exceedance, stats.norm.sf((level - mean) / np.sqrt(variance)), atol=1e-6)
    result = qgis_processing.run("fieldcast:predictpoints", {
        "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", "MODEL": model, "BACKTRANSFORM": "mean",
        "TARGETS": labelled_layer(targets), "OUTPUT": str(tmp_path / "means.gpkg")})
    means = [feature["zinc_est"] for feature in QgsVectorLayer(result["OUTPUT"], "means", "ogr").getFeatures()]
    np.testing.assert_allclose(means, document.transform.back_mean(mean, variance), rtol=1e-6)


def test_normal_score_model_in_crossvalidate_and_simulate(qgis_processing, meuse, tmp_path):  # noqa: F811
    model = fit(qgis_processing, meuse, tmp_path / "zinc.json", TRANSFORM="normalscore")["OUTPUT_MODEL"]
    document = ModelDocument.load(model)
    samples = point_layer(meuse.xy, {"zinc": meuse.zinc})
    outputs = qgis_processing.run("fieldcast:crossvalidate", {"INPUT": samples, "FIELD": "zinc", "MODEL": model,
                                                              "OUTPUT": "memory:"})
    # Closed-form leave-one-out (Dubrule 1983) of the recorded scores; attribute-unit errors through the inverse.
    scores = document.transform.forward(meuse.zinc)
    expected = leave_one_out(meuse.xy, scores, document.covariance, document.mean).attribute_summary(
        document.transform)
    assert outputs["RMSE_ATTRIBUTE"] == pytest.approx(expected["RMSE_ATTRIBUTE"], rel=1e-9)
    result = qgis_processing.run("fieldcast:simulate", {
        "INPUT": samples, "FIELD": "zinc", "MODEL": model, "PIXEL_SIZE": 400.0, "REALIZATIONS": 4, "SEED": 3,
        "OUTPUT": str(tmp_path / "sims.tif")})
    bands = gdal.Open(result["OUTPUT"]).ReadAsArray()
    low, high = document.transform.knots[0][0], document.transform.knots[-1][0]
    assert bands.min() >= np.float32(low) and bands.max() <= np.float32(high)  # inside the stated tail bounds


def test_boxcox_with_lambda_zero_fits_the_log_model(qgis_processing, meuse, tmp_path):  # noqa: F811
    # Box & Cox (1964): lambda = 0 is the log transform, so the fitted covariance must be the log model's.
    log_model = ModelDocument.load(fit(qgis_processing, meuse, tmp_path / "log.json", TRANSFORM="log")["OUTPUT_MODEL"])
    boxcox = ModelDocument.load(fit(qgis_processing, meuse, tmp_path / "bc.json", TRANSFORM="boxcox",
                                    BOXCOX_LAMBDA=0.0)["OUTPUT_MODEL"])
    assert boxcox.transform == Transform("boxcox", 0.0, 0.0)
    assert boxcox.covariance.to_dict() == log_model.covariance.to_dict()


def test_boxcox_lambda_estimated_by_the_fit(qgis_processing, meuse, tmp_path):  # noqa: F811
    log = Log()
    document = ModelDocument.load(fit(qgis_processing, meuse, tmp_path / "bc.json", log,
                                      TRANSFORM="boxcox")["OUTPUT_MODEL"])
    # The estimate maximises the profile likelihood (Box & Cox 1964): no lower than at the log (0) and at no
    # transform (1), each profile refitted with the same settings.
    lam = document.transform.boxcox_lambda
    assert -1.0 <= lam <= 2.0
    options = FitOptions(kernel="spherical", anisotropy=False, mean="constant", method="reml")
    best = boxcox_profile(lam, meuse.xy, meuse.zinc, 0.0, options)
    assert best >= max(boxcox_profile(0.0, meuse.xy, meuse.zinc, 0.0, options),
                       boxcox_profile(1.0, meuse.xy, meuse.zinc, 0.0, options))
    assert any("profile likelihood" in line for line in log.lines)


def test_predictmany_learns_the_normal_scores_of_each_field(qgis_processing, meuse, tmp_path):  # noqa: F811
    samples = point_layer(meuse.xy, {"zinc": meuse.zinc, "lead": meuse.lead})
    qgis_processing.run("fieldcast:predictmany", {
        "INPUT": samples, "FIELDS": ["zinc", "lead"], "TRANSFORM": "normalscore", **SETTINGS, "PIXEL_SIZE": 400.0,
        "OUTPUT_FOLDER": str(tmp_path / "out")})
    for field, values in (("zinc", meuse.zinc), ("lead", meuse.lead)):
        document = ModelDocument.load(str(tmp_path / "out" / f"{field}_model.json"))
        assert document.transform == Transform.normal_score(values, decluster(meuse.xy, values).weights)


def test_shared_model_refuses_a_transform_learnt_per_field(qgis_processing, meuse, tmp_path):  # noqa: F811
    samples = point_layer(meuse.xy, {"zinc": meuse.zinc, "lead": meuse.lead})
    with pytest.raises(QgsProcessingException, match=r"BOXCOX_LAMBDA.*One correlation model for all fields"):
        qgis_processing.run("fieldcast:predictmany", {
            "INPUT": samples, "FIELDS": ["zinc", "lead"], "TRANSFORM": "normalscore", "SHARED_MODEL": True,
            **SETTINGS, "PIXEL_SIZE": 200.0, "OUTPUT_FOLDER": str(tmp_path / "out")})
    assert not list((tmp_path / "out").glob("*"))
