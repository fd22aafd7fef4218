"""A run's files appear together or not at all: a failure of a later output leaves none of the earlier ones.

Data: the published Meuse topsoil samples and 40 m grid (Rikken & Van Rijn 1993, as shipped in Debian's
r-cran-sp package; tests/data/README.md), EPSG:28992 metres, zinc and copper in ppm, log models, on the 80 m
grid of tests/plugin/test_plugin_decision_maps.py. Failures are injected where a full disk or a refusing
layer provider would strike: the report writer, the second raster, the move into place, the sink.
"""
from __future__ import annotations

import pytest
from qgis.core import QgsProcessingException

from fault_injection import DISK_FULL, fail_on_call, names
from fieldcast.algorithms.io import staging
from fieldcast.algorithms.io.geotiff import GeoTiffWriter
from fieldcast.plugin import cross_validate, predict_many, simulate
from fieldcast.plugin.report import fit_report
from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures
from test_plugin_decision_maps import (  # noqa: F401 - zinc_model is a fixture
    QUICK_LOG_FIT,
    ZINC_THRESHOLD,
    grid_parameters,
    zinc_model,
)
from test_plugin_predictmany import GRID


def predict_parameters(meuse, meuse_grid, model: str, folder) -> dict:
    return {**grid_parameters(meuse, meuse_grid, model), "THRESHOLD": ZINC_THRESHOLD,
            "OUTPUT": str(folder / "prediction.tif"), "OUTPUT_VARIANCE": str(folder / "variance.tif"),
            "OUTPUT_EXCEEDANCE": str(folder / "exceedance.tif")}


def test_predict_writes_exactly_its_three_rasters(qgis_processing, meuse, meuse_grid, zinc_model, tmp_path):  # noqa: F811
    qgis_processing.run("fieldcast:predict", predict_parameters(meuse, meuse_grid, zinc_model, tmp_path))
    assert names(tmp_path) == ["exceedance.tif", "prediction.tif", "variance.tif"]


@pytest.mark.parametrize(("owner", "attribute"), [(GeoTiffWriter, "commit"), (staging.StagedFile, "move_into_place")],
                         ids=["second raster fails", "second move into place fails"])
def test_predict_whose_second_raster_fails_leaves_no_file(qgis_processing, meuse, meuse_grid, zinc_model,  # noqa: F811
                                                          tmp_path, monkeypatch, owner, attribute):
    fail_on_call(monkeypatch, owner, attribute, 2)
    with pytest.raises(QgsProcessingException, match=DISK_FULL):
        qgis_processing.run("fieldcast:predict", predict_parameters(meuse, meuse_grid, zinc_model, tmp_path))
    assert names(tmp_path) == []


def fit_parameters(meuse, folder) -> dict:
    return {"INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", **QUICK_LOG_FIT,
            "OUTPUT_MODEL": str(folder / "zinc.json"), "OUTPUT_REPORT": str(folder / "zinc_fit.html")}


def test_fitmodel_writes_the_model_file_and_the_report(qgis_processing, meuse, tmp_path):  # noqa: F811
    qgis_processing.run("fieldcast:fitmodel", fit_parameters(meuse, tmp_path))
    assert names(tmp_path) == ["zinc.json", "zinc_fit.html"]


def test_fitmodel_whose_report_fails_leaves_no_model_file(qgis_processing, meuse, tmp_path, monkeypatch):  # noqa: F811
    (tmp_path / "zinc.json").write_text("an earlier model file")
    fail_on_call(monkeypatch, fit_report, "write_text_atomically", 1)
    with pytest.raises(QgsProcessingException, match=DISK_FULL):
        qgis_processing.run("fieldcast:fitmodel", fit_parameters(meuse, tmp_path))
    assert names(tmp_path) == ["zinc.json"]
    assert (tmp_path / "zinc.json").read_text() == "an earlier model file"


def simulate_parameters(meuse, meuse_grid, model: str, folder) -> dict:
    return {**grid_parameters(meuse, meuse_grid, model), "REALIZATIONS": 3, "THRESHOLD": ZINC_THRESHOLD,
            "OUTPUT": str(folder / "realisations.tif"), "OUTPUT_MEAN": str(folder / "mean.tif"),
            "OUTPUT_TABLE": "memory:"}


def test_simulate_writes_its_rasters_and_table(qgis_processing, meuse, meuse_grid, zinc_model, tmp_path):  # noqa: F811
    results = qgis_processing.run("fieldcast:simulate", simulate_parameters(meuse, meuse_grid, zinc_model, tmp_path))
    assert names(tmp_path) == ["mean.tif", "realisations.tif"]
    assert results["OUTPUT_TABLE"]


def test_simulate_whose_table_fails_leaves_no_raster(qgis_processing, meuse, meuse_grid, zinc_model,  # noqa: F811
                                                     tmp_path, monkeypatch):
    fail_on_call(monkeypatch, simulate, "add_feature", 2)
    with pytest.raises(QgsProcessingException, match=DISK_FULL):
        qgis_processing.run("fieldcast:simulate", simulate_parameters(meuse, meuse_grid, zinc_model, tmp_path))
    assert names(tmp_path) == []


def test_crossvalidate_whose_points_fail_leaves_no_report(qgis_processing, meuse, zinc_model,  # noqa: F811
                                                          tmp_path, monkeypatch):
    fail_on_call(monkeypatch, cross_validate, "add_feature", 10)
    with pytest.raises(QgsProcessingException, match=DISK_FULL):
        qgis_processing.run("fieldcast:crossvalidate", {
            "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", "MODEL": zinc_model,
            "OUTPUT": "memory:", "OUTPUT_REPORT": str(tmp_path / "zinc_cv.html")})
    assert names(tmp_path) == []


def predictmany_parameters(meuse, folder) -> dict:
    return {"INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc, "copper": meuse.copper}),
            "FIELDS": ["zinc", "copper"], **QUICK_LOG_FIT, **GRID, "OUTPUT_FOLDER": str(folder)}


def test_predictmany_writes_every_field_and_nothing_else(qgis_processing, meuse, tmp_path):  # noqa: F811
    qgis_processing.run("fieldcast:predictmany", predictmany_parameters(meuse, tmp_path))
    assert names(tmp_path) == sorted(f"{field}_{kind}" for field in ("zinc", "copper")
                                     for kind in ("model.json", "prediction.tif", "variance.tif", "sd.tif"))


def test_predictmany_whose_second_field_fails_leaves_no_file_of_the_first(qgis_processing, meuse,  # noqa: F811
                                                                          tmp_path, monkeypatch):
    fail_on_call(monkeypatch, predict_many, "fit_document", 2)
    with pytest.raises(QgsProcessingException, match=DISK_FULL):
        qgis_processing.run("fieldcast:predictmany", predictmany_parameters(meuse, tmp_path))
    assert names(tmp_path) == []
