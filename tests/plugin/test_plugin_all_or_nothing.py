"""A run's files appear together or not at all: a failure of a later output leaves none of the earlier ones.

Data: the published Meuse topsoil samples and 40 m grid (Rikken & Van Rijn 1993, as shipped in Debian's
r-cran-sp package; tests/data/README.md), EPSG:28992 metres, zinc and copper in ppm, log models, on the 80 m
grid of tests/plugin/test_plugin_decision_maps.py. Failures are injected where a full disk or a refusing
layer provider would strike: the report writer, the second raster, the move into place, the sink.
"""
from __future__ import annotations

import os
import subprocess
import sys
import time

import pytest
from qgis.core import QgsProcessingException, QgsProcessingFeedback

from fault_injection import DISK_FULL, fail_on_call, names
from fieldcast.algorithms.io import staging
from fieldcast.algorithms.io.geotiff import GeoTiffWriter
from fieldcast.plugin import predict_many, sinks
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
            "OUTPUT_EXCEEDANCE": str(folder / "exceedance.tif"), "OUTPUT_DISTANCE": str(folder / "distance.tif")}


def test_predict_writes_exactly_its_four_rasters(qgis_processing, meuse, meuse_grid, zinc_model, tmp_path):  # noqa: F811
    qgis_processing.run("fieldcast:predict", predict_parameters(meuse, meuse_grid, zinc_model, tmp_path))
    assert names(tmp_path) == ["distance.tif", "exceedance.tif", "prediction.tif", "variance.tif"]


@pytest.mark.parametrize(("owner", "attribute"), [(GeoTiffWriter, "commit"), (staging.StagedFile, "move_into_place")],
                         ids=["second raster fails", "second move into place fails"])
def test_predict_whose_second_raster_fails_leaves_no_file(qgis_processing, meuse, meuse_grid, zinc_model,  # noqa: F811
                                                          tmp_path, monkeypatch, owner, attribute):
    fail_on_call(monkeypatch, owner, attribute, 2)
    with pytest.raises(QgsProcessingException, match=DISK_FULL):
        qgis_processing.run("fieldcast:predict", predict_parameters(meuse, meuse_grid, zinc_model, tmp_path))
    assert names(tmp_path) == []


def test_predict_whose_distance_raster_fails_leaves_no_file(qgis_processing, meuse, meuse_grid, zinc_model,  # noqa: F811
                                                            tmp_path, monkeypatch):
    fail_on_call(monkeypatch, GeoTiffWriter, "commit", 4)  # the distance raster is committed last
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
    fail_on_call(monkeypatch, sinks, "add_feature", 2)
    with pytest.raises(QgsProcessingException, match=DISK_FULL):
        qgis_processing.run("fieldcast:simulate", simulate_parameters(meuse, meuse_grid, zinc_model, tmp_path))
    assert names(tmp_path) == []


def test_crossvalidate_whose_points_fail_leaves_no_report(qgis_processing, meuse, zinc_model,  # noqa: F811
                                                          tmp_path, monkeypatch):
    fail_on_call(monkeypatch, sinks, "add_feature", 10)
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


def test_simulate_whose_csv_table_fails_leaves_no_table(qgis_processing, meuse, meuse_grid, zinc_model,  # noqa: F811
                                                        tmp_path, monkeypatch):
    fail_on_call(monkeypatch, sinks, "add_feature", 2)
    parameters = {**simulate_parameters(meuse, meuse_grid, zinc_model, tmp_path),
                  "OUTPUT_TABLE": str(tmp_path / "t.csv")}
    with pytest.raises(QgsProcessingException, match=DISK_FULL):
        qgis_processing.run("fieldcast:simulate", parameters)
    assert names(tmp_path) == []


def test_simulate_whose_csv_table_fails_puts_the_earlier_table_back(qgis_processing, meuse, meuse_grid,  # noqa: F811
                                                                    zinc_model, tmp_path, monkeypatch):  # noqa: F811
    earlier = tmp_path / "t.csv"
    earlier.write_text("realisation,area_above,mask_mean\n1,2.0,3.0\n")
    fail_on_call(monkeypatch, sinks, "add_feature", 3)
    parameters = {**simulate_parameters(meuse, meuse_grid, zinc_model, tmp_path), "OUTPUT_TABLE": str(earlier)}
    with pytest.raises(QgsProcessingException, match=DISK_FULL):
        qgis_processing.run("fieldcast:simulate", parameters)
    assert names(tmp_path) == ["t.csv"]
    assert earlier.read_text() == "realisation,area_above,mask_mean\n1,2.0,3.0\n"


def test_a_table_that_replaces_an_earlier_one_leaves_no_backup(qgis_processing, meuse, meuse_grid,  # noqa: F811
                                                               zinc_model, tmp_path):  # noqa: F811
    earlier = tmp_path / "t.csv"
    earlier.write_text("an earlier table\n")
    parameters = {**simulate_parameters(meuse, meuse_grid, zinc_model, tmp_path), "OUTPUT_TABLE": str(earlier)}
    qgis_processing.run("fieldcast:simulate", parameters)
    assert names(tmp_path) == ["mean.tif", "realisations.tif", "t.csv"]
    assert earlier.read_text().splitlines()[0] == "realisation,area_above,mask_mean"
    assert len(earlier.read_text().splitlines()) == 4  # a header and the three realisations


def test_crossvalidate_into_a_geopackage_that_fails_keeps_its_other_layers(qgis_processing, meuse, zinc_model,  # noqa: F811
                                                                           tmp_path, monkeypatch):
    package = tmp_path / "survey.gpkg"
    base = {"INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", "MODEL": zinc_model}
    qgis_processing.run("fieldcast:crossvalidate", {**base, "OUTPUT": f"ogr:dbname='{package}' table=\"first\""})
    before = package.read_bytes()
    fail_on_call(monkeypatch, sinks, "add_feature", 10)
    with pytest.raises(QgsProcessingException, match=DISK_FULL):
        qgis_processing.run("fieldcast:crossvalidate", {**base, "OUTPUT": f"ogr:dbname='{package}' table=\"second\""})
    assert names(tmp_path) == ["survey.gpkg"] and package.read_bytes() == before


def test_files_left_by_a_killed_run_are_cleared_and_logged(qgis_processing, meuse, meuse_grid,  # noqa: F811
                                                           zinc_model, tmp_path):  # noqa: F811
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()  # its process id is now one of a process that has ended, as a killed run's
    left = [f".prediction.tif.fieldcast-{child.pid}-0123456789ab.part",
            f".prediction.tif.fieldcast-{child.pid}-0123456789ab.part.aux.xml"]
    minute_ago = time.time() - 60
    for name in left:
        (tmp_path / name).write_text("partial")
        os.utime(tmp_path / name, (minute_ago, minute_ago))
    (tmp_path / "notes.part").write_text("not ours")
    feedback = QgsProcessingFeedback()
    qgis_processing.run("fieldcast:predict", predict_parameters(meuse, meuse_grid, zinc_model, tmp_path),
                        feedback=feedback)
    assert names(tmp_path) == ["distance.tif", "exceedance.tif", "notes.part", "prediction.tif", "variance.tif"]
    assert (f"Cleared in {tmp_path} the files an interrupted earlier run left behind: {left[0]} removed; "
            f"{left[1]} removed.") in feedback.textLog()


def test_crossvalidate_into_a_shapefile_that_fails_leaves_none_of_its_files(qgis_processing, meuse,  # noqa: F811
                                                                            zinc_model, tmp_path, monkeypatch):  # noqa: F811
    fail_on_call(monkeypatch, sinks, "add_feature", 10)
    with pytest.raises(QgsProcessingException, match=DISK_FULL):
        qgis_processing.run("fieldcast:crossvalidate", {
            "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", "MODEL": zinc_model,
            "OUTPUT": str(tmp_path / "cv.shp")})
    assert names(tmp_path) == []
