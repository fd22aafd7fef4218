"""NUGGET, ERROR_VARIANCE_FIELD and PREDICT_TARGET through processing.run, and their refusals.

Data: the published Meuse samples (Rikken & Van Rijn 1993; tests/data/README.md), EPSG:28992 metres, log zinc
and log cadmium. The error variances are a stated test diagonal (Meuse publishes none). The kriging numbers are
checked against the engine's predictors, which tests/predict/test_measurement_error.py checks against the
bordered kriging system (Cressie 1993, sections 3.2-3.4); predictpoints is checked against that system here.
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from osgeo import gdal

from fieldcast.algorithms.io.model_file import ModelDocument
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.predict.crossval import leave_one_out
from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures
from test_plugin_bad_inputs import QUICK_FIT, run_logged, run_refused  # noqa: F401 - run_refused is a fixture
from test_plugin_predictpoints import columns, labelled_layer

LOG_FIT = {"TRANSFORM": "log", "KERNEL": "spherical", "ANISOTROPY": False}


def stated_diagonal(n: int) -> np.ndarray:
    """Error variances 0.01 to 0.09 (log units squared), cycling over the samples."""
    return 0.01 + 0.02 * (np.arange(n) % 5)


def bordered(xy, values, model, xy0, error_variance):
    """Ordinary kriging mean and latent variance from the bordered (Lagrange) system, solved directly.

    Cressie 1993, Statistics for Spatial Data, section 3.2: [[K, 1], [1^T, 0]] [lambda; m] = [c0; 1], variance
    C(0) - lambda^T c0 - m, with K = C + diag(nugget + e) and c0 the covariance of the true value with the data.
    """
    n = len(xy)
    k = model.cross_covariance(xy, xy) + np.diag(model.nugget + error_variance)
    system = np.block([[k, np.ones((n, 1))], [np.ones((1, n)), np.zeros((1, 1))]])
    cross = model.cross_covariance(xy, xy0)
    solution = np.linalg.solve(system, np.vstack([cross, np.ones((1, len(xy0)))]))
    weights = solution[:n]
    return weights.T @ values, model.field_variance - np.sum(weights * cross, axis=0) - solution[n]


@pytest.fixture(scope="module")
def layer(meuse):
    return point_layer(meuse.xy, {"zinc": meuse.zinc, "cadmium": meuse.cadmium,
                                  "ev": stated_diagonal(len(meuse.zinc))})


@pytest.fixture(scope="module")
def fitted(qgis_processing, layer, tmp_path_factory):  # noqa: F811
    """A log-zinc model fitted with the error variances of ``ev`` and a fixed nugget."""
    path = tmp_path_factory.mktemp("measurement") / "zinc.json"
    result = qgis_processing.run("fieldcast:fitmodel", {"INPUT": layer, "FIELD": "zinc", **LOG_FIT, "NUGGET": 0.02,
                                                        "ERROR_VARIANCE_FIELD": "ev", "OUTPUT_MODEL": str(path)})
    return result, str(path)


def test_fitmodel_holds_the_nugget_and_records_the_error_variance_field(fitted):
    result, path = fitted
    assert result["NUGGET"] == pytest.approx(0.02, rel=1e-12)
    fit = json.loads(Path(path).read_text(encoding="utf-8"))["fit"]
    assert fit["fixed_nugget"] == 0.02 and fit["error_variance_field"] == "ev"


def test_a_fixed_nugget_for_log_cadmium_is_kept(qgis_processing, layer, tmp_path):  # noqa: F811
    # Meuse log cadmium: NUGGET (in log units squared) holds the nugget where laboratory duplicates would put it;
    # a held nugget cannot raise the maximum of the likelihood.
    free = qgis_processing.run("fieldcast:fitmodel", {"INPUT": layer, "FIELD": "cadmium", **LOG_FIT,
                                                      "OUTPUT_MODEL": str(tmp_path / "free.json")})
    held = qgis_processing.run("fieldcast:fitmodel", {"INPUT": layer, "FIELD": "cadmium", **LOG_FIT, "NUGGET": 0.3,
                                                      "OUTPUT_MODEL": str(tmp_path / "held.json")})
    assert free["NUGGET"] != pytest.approx(0.3, rel=1e-3) and held["NUGGET"] == pytest.approx(0.3, rel=1e-12)
    assert held["LOG_LIKELIHOOD"] <= free["LOG_LIKELIHOOD"] + 1e-6


def test_predictpoints_of_a_new_measurement_with_the_error_variances(qgis_processing, layer, fitted, meuse,  # noqa: F811
                                                                     meuse_grid, tmp_path):
    _, path = fitted
    document = ModelDocument.load(path)
    targets = meuse_grid.xy[::60]
    error_variance = stated_diagonal(len(meuse.zinc))
    runs = {}
    for target in ("true", "measurement"):
        out = qgis_processing.run("fieldcast:predictpoints", {
            "INPUT": layer, "FIELD": "zinc", "MODEL": path, "TARGETS": labelled_layer(targets),
            "ERROR_VARIANCE_FIELD": "ev", "PREDICT_TARGET": target, "BACKTRANSFORM": "median",
            "OUTPUT": str(tmp_path / f"{target}.gpkg")})["OUTPUT"]
        runs[target] = columns(out, ["zinc_est", "zinc_var"])
    mean, variance = bordered(meuse.xy, np.log(meuse.zinc), document.covariance, targets, error_variance)
    np.testing.assert_allclose(np.log(runs["true"]["zinc_est"]), mean, rtol=1e-10)
    np.testing.assert_allclose(runs["measurement"]["zinc_est"], runs["true"]["zinc_est"], rtol=1e-12)
    # Lognormal variance exp(2 mu + s2) (exp(s2) - 1) with s2 the latent variance plus nugget plus median e.
    s2 = variance + document.covariance.nugget + np.median(error_variance)
    np.testing.assert_allclose(runs["measurement"]["zinc_var"], np.exp(2 * mean + s2) * np.expm1(s2), rtol=1e-9)


def test_crossvalidate_uses_the_error_variances(qgis_processing, layer, fitted, meuse, tmp_path):  # noqa: F811
    _, path = fitted
    document = ModelDocument.load(path)
    out = qgis_processing.run("fieldcast:crossvalidate", {"INPUT": layer, "FIELD": "zinc", "MODEL": path,
                                                          "ERROR_VARIANCE_FIELD": "ev", "OUTPUT_REPORT": "",
                                                          "OUTPUT": str(tmp_path / "cv.gpkg")})["OUTPUT"]
    written = columns(out, ["cv_predicted", "cv_std_error"])
    expected = leave_one_out(meuse.xy, np.log(meuse.zinc), document.covariance,
                             MeanModel.for_data("constant", meuse.xy), error_variance=stated_diagonal(len(meuse.zinc)))
    np.testing.assert_allclose(written["cv_predicted"], expected.predicted, rtol=1e-10)
    np.testing.assert_allclose(np.square(written["cv_std_error"]), expected.variance, rtol=1e-10)


def test_a_model_fitted_with_error_variances_used_without_them_is_warned(qgis_processing, layer, fitted,  # noqa: F811
                                                                         tmp_path):
    _, path = fitted
    _, log = run_logged(qgis_processing, "fieldcast:predictpoints", {
        "INPUT": layer, "FIELD": "zinc", "MODEL": path, "TARGETS": labelled_layer(np.array([[179500.0, 331000.0]])),
        "NUGGET": 0.5, "OUTPUT": str(tmp_path / "points.gpkg")})
    assert "NUGGET is ignored: the model file's nugget applies" in log
    assert "Set ERROR_VARIANCE_FIELD to that field" in log


@pytest.mark.parametrize("bad", [-0.1, np.nan])
def test_negative_or_empty_error_variances_are_refused_naming_the_features(run_refused, meuse, bad):  # noqa: F811
    variances = stated_diagonal(len(meuse.zinc))
    variances[[3, 7]] = bad
    samples = point_layer(meuse.xy, {"zinc": meuse.zinc, "ev": variances})
    fids = [feature.id() for feature in samples.getFeatures()]
    run_refused("fieldcast:fitmodel", {"INPUT": samples, "FIELD": "zinc", **QUICK_FIT, "ERROR_VARIANCE_FIELD": "ev"},
                "2 sample(s) have an empty, non-numeric or negative error variance in 'ev'",
                f"feature id(s) {fids[3]}, {fids[7]}", "or leave ERROR_VARIANCE_FIELD empty")


def test_a_new_measurement_of_a_cell_average_is_refused(run_refused, layer, fitted):  # noqa: F811
    _, path = fitted
    run_refused("fieldcast:predict", {"INPUT": layer, "FIELD": "zinc", "MODEL": path, "SUPPORT": "cell",
                                      "PIXEL_SIZE": 400.0, "PREDICT_TARGET": "measurement"},
                "A new measurement is taken at a point: set SUPPORT to point")


def test_a_fixed_nugget_with_the_variogram_fit_is_refused(run_refused, layer):  # noqa: F811
    run_refused("fieldcast:fitmodel", {"INPUT": layer, "FIELD": "zinc", **QUICK_FIT, "METHOD": "wls",
                                       "NUGGET": 0.1}, "choose METHOD reml or ml, or leave NUGGET empty")


@pytest.mark.parametrize("setting", [{"ERROR_VARIANCE_FIELD": "ev"}, {"NUGGET": 0.1}])
def test_predictmany_refuses_measurement_settings_with_a_shared_model(run_refused, layer, tmp_path,  # noqa: F811
                                                                      setting):
    run_refused("fieldcast:predictmany", {"INPUT": layer, "FIELDS": ["zinc", "cadmium"], **QUICK_FIT,
                                          "SHARED_MODEL": True, **setting, "PIXEL_SIZE": 400.0,
                                          "OUTPUT_FOLDER": str(tmp_path / "many")},
                "leave NUGGET and ERROR_VARIANCE_FIELD empty, or turn off")


def test_predictmany_of_a_new_measurement_adds_the_fixed_nugget(qgis_processing, layer, tmp_path):  # noqa: F811
    # Two runs that differ only in PREDICT_TARGET: the variance rasters differ by the held nugget (no transform).
    variances = {}
    for target in ("true", "measurement"):
        folder = tmp_path / target
        qgis_processing.run("fieldcast:predictmany", {"INPUT": layer, "FIELDS": ["zinc"], **QUICK_FIT,
                                                      "NUGGET": 900.0, "PREDICT_TARGET": target, "PIXEL_SIZE": 400.0,
                                                      "MAP_AREA": "extent", "OUTPUT_FOLDER": str(folder)})
        variances[target] = gdal.Open(str(folder / "zinc_variance.tif")).ReadAsArray().astype(float)
        model = json.loads((folder / "zinc_model.json").read_text(encoding="utf-8"))
        assert model["nugget"] == 900.0 and model["fit"]["fixed_nugget"] == 900.0
    # Float32 rasters: equal to single precision (IEEE 754, 2**-24) of the larger variances.
    np.testing.assert_allclose(variances["measurement"] - variances["true"], 900.0, rtol=0,
                               atol=1e-6 * variances["measurement"].max())


def test_fitmodel_report_and_simulate_take_the_error_variances(qgis_processing, layer, fitted, tmp_path):  # noqa: F811
    _, log = run_logged(qgis_processing, "fieldcast:fitmodel", {
        "INPUT": layer, "FIELD": "zinc", **LOG_FIT, "ERROR_VARIANCE_FIELD": "ev",
        "OUTPUT_MODEL": str(tmp_path / "zinc.json"), "OUTPUT_REPORT": str(tmp_path / "fit.html")})
    assert "with the error variances of ev" in log and "per-sample error variances of ev" in log
    assert (tmp_path / "fit.html").is_file()
    _, path = fitted
    _, log = run_logged(qgis_processing, "fieldcast:simulate", {
        "INPUT": layer, "FIELD": "zinc", "MODEL": path, "ERROR_VARIANCE_FIELD": "ev", "PIXEL_SIZE": 400.0,
        "REALIZATIONS": 2, "OUTPUT": str(tmp_path / "realisations.tif")})
    assert "fitted with the per-sample error variances of ev" in log
    assert gdal.Open(str(tmp_path / "realisations.tif")).RasterCount == 2
