"""Outputs that would overwrite an input file or another output are refused before any work.

Samples are the published Meuse data (tests/data/README.md), saved to a GeoPackage so the input is a file.
"""
from __future__ import annotations

import hashlib
from pathlib import Path

import pytest
from qgis.core import (
    QgsCoordinateTransformContext,
    QgsFeature,
    QgsGeometry,
    QgsProcessingException,
    QgsVectorFileWriter,
    QgsVectorLayer,
)

from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures

QUICK_FIT = {"KERNEL": "exponential", "ANISOTROPY": False}


def digest(path: Path) -> str:
    """SHA-256 of a file's bytes."""
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture()
def samples_file(meuse, tmp_path) -> Path:
    """The Meuse zinc samples in a GeoPackage of their own."""
    path = tmp_path / "samples.gpkg"
    options = QgsVectorFileWriter.SaveVectorOptions()
    options.driverName = "GPKG"
    error = QgsVectorFileWriter.writeAsVectorFormatV3(point_layer(meuse.xy, {"zinc": meuse.zinc}), str(path),
                                                      QgsCoordinateTransformContext(), options)
    assert error[0] == QgsVectorFileWriter.NoError
    return path


@pytest.fixture()
def model_file(qgis_processing, samples_file, tmp_path) -> Path:  # noqa: F811
    path = tmp_path / "zinc.json"
    qgis_processing.run("fieldcast:fitmodel", {"INPUT": str(samples_file), "FIELD": "zinc", **QUICK_FIT,
                                               "OUTPUT_MODEL": str(path)})
    return path


def refused(processing, algorithm: str, parameters: dict, guarded: Path) -> str:
    """Run an algorithm that must be refused; check ``guarded`` kept its bytes; the message."""
    before = digest(guarded)
    with pytest.raises(QgsProcessingException) as error:
        processing.run(algorithm, parameters)
    assert digest(guarded) == before
    return str(error.value)


def test_fit_model_refuses_to_overwrite_its_input(qgis_processing, samples_file):  # noqa: F811
    message = refused(qgis_processing, "fieldcast:fitmodel",
                      {"INPUT": str(samples_file), "FIELD": "zinc", **QUICK_FIT, "OUTPUT_MODEL": str(samples_file)},
                      samples_file)
    assert message == (f"OUTPUT_MODEL would overwrite the input file {samples_file} (INPUT). "
                       "Choose another file name.")


def test_cross_validation_refuses_to_overwrite_its_input_layer(qgis_processing, samples_file,  # noqa: F811
                                                               model_file, tmp_path):
    layer = QgsVectorLayer(f"{samples_file}|layername=samples", "samples", "ogr")
    assert layer.isValid()
    message = refused(qgis_processing, "fieldcast:crossvalidate",
                      {"INPUT": layer, "FIELD": "zinc", "MODEL": str(model_file),
                       "OUTPUT": f"{samples_file}|layername=cv", "OUTPUT_REPORT": str(tmp_path / "cv.html")},
                      samples_file)
    assert f"OUTPUT would overwrite the input file {samples_file} (INPUT)" in message
    assert not (tmp_path / "cv.html").exists()


def test_simulate_refuses_a_table_over_its_input(qgis_processing, samples_file, model_file, tmp_path):  # noqa: F811
    message = refused(qgis_processing, "fieldcast:simulate",
                      {"INPUT": str(samples_file), "FIELD": "zinc", "MODEL": str(model_file), "PIXEL_SIZE": 400,
                       "REALIZATIONS": 2, "OUTPUT": str(tmp_path / "sims.tif"), "OUTPUT_TABLE": str(samples_file)},
                      samples_file)
    assert f"OUTPUT_TABLE would overwrite the input file {samples_file} (INPUT)" in message
    assert not (tmp_path / "sims.tif").exists()


def test_predict_refuses_to_overwrite_its_model_file(qgis_processing, samples_file, model_file):  # noqa: F811
    message = refused(qgis_processing, "fieldcast:predict",
                      {"INPUT": str(samples_file), "FIELD": "zinc", "MODEL": str(model_file), "PIXEL_SIZE": 400,
                       "OUTPUT": str(model_file)}, model_file)
    assert f"would overwrite the input file {model_file} (MODEL)" in message


def test_predict_refuses_two_outputs_on_one_file(qgis_processing, samples_file, model_file, tmp_path):  # noqa: F811
    surface = tmp_path / "zinc.tif"
    with pytest.raises(QgsProcessingException) as error:
        qgis_processing.run("fieldcast:predict", {
            "INPUT": str(samples_file), "FIELD": "zinc", "MODEL": str(model_file), "PIXEL_SIZE": 400,
            "OUTPUT": str(surface), "OUTPUT_VARIANCE": str(surface)})
    assert str(error.value) == (f"OUTPUT and OUTPUT_VARIANCE are the same file {surface}; give each output its own "
                                "file name.")
    assert not surface.exists()


def test_predict_many_refuses_a_folder_file_over_its_extent_raster(qgis_processing, samples_file,  # noqa: F811
                                                                   model_file, tmp_path):
    grid = tmp_path / "zinc_prediction.tif"
    qgis_processing.run("fieldcast:predict", {"INPUT": str(samples_file), "FIELD": "zinc", "MODEL": str(model_file),
                                              "PIXEL_SIZE": 400, "OUTPUT": str(grid)})
    message = refused(qgis_processing, "fieldcast:predictmany",
                      {"INPUT": str(samples_file), "FIELDS": ["zinc"], **QUICK_FIT, "PIXEL_SIZE": 400,
                       "EXTENT": str(grid), "OUTPUT_FOLDER": str(tmp_path)}, grid)
    assert f"would overwrite the input file {grid} (EXTENT)" in message


def test_simulate_refuses_a_table_over_its_mask_file(qgis_processing, samples_file, model_file, tmp_path):  # noqa: F811
    mask_file = tmp_path / "site.gpkg"  # a square around the Meuse samples (EPSG:28992), saved as a GeoPackage
    mask = QgsVectorLayer("Polygon?crs=EPSG:28992", "site", "memory")
    square = QgsFeature()
    square.setGeometry(QgsGeometry.fromWkt("POLYGON((178000 329000, 182000 329000, 182000 334000, "
                                           "178000 334000, 178000 329000))"))
    mask.dataProvider().addFeatures([square])
    options = QgsVectorFileWriter.SaveVectorOptions()
    options.driverName = "GPKG"
    assert QgsVectorFileWriter.writeAsVectorFormatV3(mask, str(mask_file), QgsCoordinateTransformContext(),
                                                     options)[0] == QgsVectorFileWriter.NoError
    message = refused(qgis_processing, "fieldcast:simulate",
                      {"INPUT": str(samples_file), "FIELD": "zinc", "MODEL": str(model_file), "PIXEL_SIZE": 400,
                       "MASK": str(mask_file), "REALIZATIONS": 2, "OUTPUT": str(tmp_path / "sims.tif"),
                       "OUTPUT_TABLE": str(mask_file)}, mask_file)
    assert f"OUTPUT_TABLE would overwrite the input file {mask_file} (MASK)" in message
    assert not (tmp_path / "sims.tif").exists()


def test_separate_files_still_run(qgis_processing, samples_file, model_file, tmp_path):  # noqa: F811
    before = digest(samples_file)
    results = qgis_processing.run("fieldcast:crossvalidate", {
        "INPUT": str(samples_file), "FIELD": "zinc", "MODEL": str(model_file),
        "OUTPUT": str(tmp_path / "cv.gpkg"), "OUTPUT_REPORT": str(tmp_path / "cv.html")})
    assert Path(results["OUTPUT"].split("|")[0]).exists()
    assert digest(samples_file) == before


@pytest.mark.parametrize("destination", ["ogr:dbname='{path}' table=\"cv\" (geom)", "ogr:dbname={path} table=cv",
                                         "ogr:{path}", "dbname='{path}' table=cv"],
                         ids=["ogr quoted", "ogr bare", "ogr path", "no prefix"])
def test_an_ogr_uri_over_the_input_is_refused(qgis_processing, samples_file, model_file, tmp_path,  # noqa: F811
                                              destination):
    message = refused(qgis_processing, "fieldcast:crossvalidate",
                      {"INPUT": str(samples_file), "FIELD": "zinc", "MODEL": str(model_file),
                       "OUTPUT": destination.format(path=samples_file), "OUTPUT_REPORT": str(tmp_path / "cv.html")},
                      samples_file)
    assert f"OUTPUT would overwrite the input file {samples_file} (INPUT)" in message
    assert not (tmp_path / "cv.html").exists()


def test_an_ogr_uri_table_on_the_report_file_is_refused(qgis_processing, samples_file, model_file,  # noqa: F811
                                                        tmp_path):
    table = tmp_path / "sims.gpkg"
    with pytest.raises(QgsProcessingException) as error:
        qgis_processing.run("fieldcast:simulate", {
            "INPUT": str(samples_file), "FIELD": "zinc", "MODEL": str(model_file), "PIXEL_SIZE": 400,
            "REALIZATIONS": 2, "OUTPUT": str(table), "OUTPUT_TABLE": f"ogr:dbname='{table}' table=\"summary\""})
    assert str(error.value) == (f"OUTPUT and OUTPUT_TABLE are the same file {table}; give each output its own "
                                "file name.")
    assert not table.exists()


def read_only(path: Path, text: str) -> Path:
    path.write_text(text)
    path.chmod(0o444)
    return path


@pytest.mark.parametrize(("name", "output"), [("OUTPUT", "zinc.tif"), ("OUTPUT_TABLE", "sims.csv")])
def test_a_read_only_output_is_refused_before_any_work(qgis_processing, samples_file, model_file, tmp_path,  # noqa: F811
                                                       name, output):
    outputs = {"OUTPUT": str(tmp_path / "zinc.tif"), "OUTPUT_TABLE": str(tmp_path / "sims.csv")}
    kept = read_only(tmp_path / output, "kept on purpose")
    message = refused(qgis_processing, "fieldcast:simulate",
                      {"INPUT": str(samples_file), "FIELD": "zinc", "MODEL": str(model_file), "PIXEL_SIZE": 400,
                       "REALIZATIONS": 2, **outputs}, kept)
    assert message == (f"The output file {kept} ({name}) exists and is read-only, so it is not replaced. "
                       "Make the file writable if it may be replaced, or choose another file name.")
    assert kept.stat().st_mode & 0o777 == 0o444
    assert sorted(path.name for path in tmp_path.iterdir()) == sorted(["samples.gpkg", "zinc.json", output])


def test_a_read_only_file_in_an_output_folder_is_refused_and_kept(qgis_processing, samples_file,  # noqa: F811
                                                                  tmp_path):
    folder = tmp_path / "many"
    folder.mkdir()
    kept = read_only(folder / "zinc_variance.tif", "kept on purpose")
    message = refused(qgis_processing, "fieldcast:predictmany",
                      {"INPUT": str(samples_file), "FIELDS": ["zinc"], **QUICK_FIT, "PIXEL_SIZE": 400,
                       "OUTPUT_FOLDER": str(folder)}, kept)
    assert message.startswith(f"The output file {kept} (OUTPUT_FOLDER (zinc_variance.tif)) exists and is read-only")
    assert sorted(path.name for path in folder.iterdir()) == ["zinc_variance.tif"]
