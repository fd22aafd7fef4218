"""Bad inputs to the toolbox algorithms: a clear message, no output file, inputs left as they were.

Samples are the published Meuse data (tests/data/README.md) in EPSG:28992, changed where a test needs a
particular defect. Fits use one family without anisotropy to stay quick.
"""
from __future__ import annotations

import hashlib
import math
import os
from pathlib import Path

import numpy as np
import pytest
from osgeo import gdal
from pyproj import Transformer
from qgis.core import (
    QgsCoordinateTransformContext,
    QgsField,
    QgsGeometry,
    QgsPointXY,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsVectorFileWriter,
    QgsVectorLayer,
)

from fieldcast.algorithms.io.crs import same_crs
from qgis_process_support import write_geopackage_without_srs
from qgis_support import (  # noqa: F401 - fieldcast_plugin and qgis_processing are fixtures
    CancelAfterFirstProgress,
    field_type,
    fieldcast_plugin,
    point_layer,
    qgis_processing,
)

QUICK_FIT = {"KERNEL": "exponential", "ANISOTROPY": False}


def layer_state(layer: QgsVectorLayer) -> list:
    """Everything a run could change in a layer: ids, attributes and geometries (repr, so NaN equals NaN)."""
    return [(f.id(), [repr(value) for value in f.attributes()], f.geometry().asWkt()) for f in layer.getFeatures()]


def input_file_bytes(parameters: dict) -> dict[str, str]:
    """SHA-256 of every existing file a run reads: layer sources and paths given as text (``path|layername=..``)."""
    named = [value.source() if isinstance(value, QgsVectorLayer) else value for value in parameters.values()]
    paths = {text.split("|")[0] for text in named if isinstance(text, str)}
    return {path: hashlib.sha256(Path(path).read_bytes()).hexdigest() for path in sorted(paths)
            if os.path.isfile(path)}


def leftovers(folder) -> list[str]:
    """Names of files in ``folder`` (outputs and temporary files alike)."""
    return sorted(path.name for path in folder.iterdir())


@pytest.fixture()
def run_refused(qgis_processing, tmp_path):  # noqa: F811
    """Run an algorithm that must fail; check the message, that no traceback reached the message or the log, that
    no file appeared, and that inputs are intact (memory layers feature by feature, input files byte for byte)."""

    def check(algorithm: str, parameters: dict, *fragments: str, feedback=None) -> None:
        layers = [value for value in parameters.values() if isinstance(value, QgsVectorLayer)]
        before = [layer_state(layer) for layer in layers]
        bytes_before = input_file_bytes(parameters)
        files_before = leftovers(tmp_path)
        report = str(tmp_path / "out_report.html")
        if algorithm == "fieldcast:fitmodel":
            outputs = {"OUTPUT_MODEL": str(tmp_path / "out_model.json"), "OUTPUT_REPORT": report}
        elif algorithm == "fieldcast:crossvalidate":
            outputs = {"OUTPUT": str(tmp_path / "out_points.gpkg"), "OUTPUT_REPORT": report}
        else:
            outputs = {name: str(tmp_path / f"out_{name.lower()}.tif") for name in ("OUTPUT", "OUTPUT_VARIANCE")}
        outputs = {name: path for name, path in outputs.items() if name not in parameters}
        feedback = feedback or QgsProcessingFeedback()
        with pytest.raises(QgsProcessingException) as error:
            qgis_processing.run(algorithm, {**parameters, **outputs}, feedback=feedback)
        for fragment in fragments:
            assert fragment in str(error.value)
        assert "Traceback" not in str(error.value) and "Traceback" not in feedback.textLog()
        assert leftovers(tmp_path) == files_before
        assert [layer_state(layer) for layer in layers] == before
        assert input_file_bytes(parameters) == bytes_before

    return check


@pytest.fixture(scope="module")
def meuse_layer(meuse) -> QgsVectorLayer:
    return point_layer(meuse.xy, {"zinc": meuse.zinc})


@pytest.fixture(scope="module")
def model_file(qgis_processing, meuse_layer, tmp_path_factory) -> str:  # noqa: F811
    path = tmp_path_factory.mktemp("model") / "zinc.json"
    qgis_processing.run("fieldcast:fitmodel", {"INPUT": meuse_layer, "FIELD": "zinc", **QUICK_FIT,
                                               "OUTPUT_MODEL": str(path)})
    return str(path)


def run_logged(processing, algorithm: str, parameters: dict) -> tuple[dict, str]:
    """Run an algorithm that must succeed; return its results and its log text."""
    feedback = QgsProcessingFeedback()
    results = processing.run(algorithm, parameters, feedback=feedback)
    return results, feedback.textLog()


def quick_fit_log(processing, layer, tmp_path) -> str:
    """Fit ``zinc`` of ``layer`` with :data:`QUICK_FIT` into ``tmp_path/m.json``; return the log text."""
    _, log = run_logged(processing, "fieldcast:fitmodel", {
        "INPUT": layer, "FIELD": "zinc", **QUICK_FIT, "OUTPUT_MODEL": str(tmp_path / "m.json")})
    return log


def test_the_refusal_check_reads_the_bytes_of_layer_files_and_model_files(meuse, model_file, tmp_path):
    path = tmp_path / "samples.gpkg"
    layer = point_layer(meuse.xy[:5], {"zinc": meuse.zinc[:5]})
    options = QgsVectorFileWriter.SaveVectorOptions()
    options.driverName = "GPKG"
    assert QgsVectorFileWriter.writeAsVectorFormatV3(layer, str(path), QgsCoordinateTransformContext(),
                                                     options)[0] == QgsVectorFileWriter.NoError
    on_disk = QgsVectorLayer(f"{path}|layername=samples", "samples", "ogr")
    assert set(input_file_bytes({"INPUT": on_disk, "MODEL": model_file, "OUTPUT": str(tmp_path / "x.tif")})) == {
        str(path), model_file}


# --- layer reading -------------------------------------------------------------------------------------------

def test_text_field_is_refused(run_refused, meuse):
    layer = point_layer(meuse.xy, {"zinc": meuse.zinc})
    layer.dataProvider().addAttributes([QgsField("label", field_type("String"))])
    layer.updateFields()
    run_refused("fieldcast:fitmodel", {"INPUT": layer, "FIELD": "label"}, "'label'", "not numbers",
                "numeric field")


def test_layer_without_crs_is_refused(run_refused, meuse):
    layer = point_layer(meuse.xy, {"zinc": meuse.zinc}, crs=None)
    run_refused("fieldcast:fitmodel", {"INPUT": layer, "FIELD": "zinc"}, "has no defined CRS",
                "Assigned Coordinate Reference System", "'Assign projection'")


def test_geopackage_written_without_srs_is_refused_not_moved_to_utm(run_refused, tmp_path_factory):
    # GDAL gives such a layer its "Undefined geographic SRS", which QGIS reports as a valid CRS in degrees.
    layer = QgsVectorLayer(write_geopackage_without_srs(tmp_path_factory.mktemp("nosrs") / "site.gpkg"), "site", "ogr")
    assert layer.isValid() and "Undefined geographic SRS" in layer.crs().toWkt()
    run_refused("fieldcast:fitmodel", {"INPUT": layer, "FIELD": "depth"}, "The layer site has no defined CRS",
                "local engineering CRS")


def test_empty_layer_is_refused(run_refused):
    layer = point_layer(np.zeros((0, 2)), {"zinc": np.zeros(0)})
    run_refused("fieldcast:fitmodel", {"INPUT": layer, "FIELD": "zinc"}, "The sample layer is empty",
                "Choose a point layer that holds samples")


def test_multipoint_with_several_points_is_refused_with_advice(run_refused, meuse):
    layer = point_layer(meuse.xy, {"zinc": meuse.zinc}, geometry="MultiPoint")
    feature = next(layer.getFeatures())
    layer.dataProvider().changeGeometryValues(
        {feature.id(): QgsGeometry.fromMultiPointXY([QgsPointXY(181072, 333611), QgsPointXY(181100, 333600)])})
    run_refused("fieldcast:fitmodel", {"INPUT": layer, "FIELD": "zinc"}, "multipoint with 2 points",
                "Multipart to singleparts")


def test_single_part_multipoints_are_read(qgis_processing, meuse, tmp_path):  # noqa: F811
    layer = point_layer(meuse.xy, {"zinc": meuse.zinc}, geometry="MultiPoint")
    results, log = run_logged(qgis_processing, "fieldcast:fitmodel", {
        "INPUT": layer, "FIELD": "zinc", **QUICK_FIT, "OUTPUT_MODEL": str(tmp_path / "m.json")})
    assert "Using 155 samples" in log and (tmp_path / "m.json").exists()


def test_null_values_are_skipped_and_counted(qgis_processing, meuse, tmp_path):  # noqa: F811
    zinc = np.array(meuse.zinc)
    zinc[[3, 10]] = np.nan  # stored as NULL by point_layer
    layer = point_layer(meuse.xy, {"zinc": zinc})
    before = layer_state(layer)
    log = quick_fit_log(qgis_processing, layer, tmp_path)
    assert "Skipped 2 feature(s) whose zinc is NULL" in log and "Using 153 samples" in log
    assert layer_state(layer) == before


def test_nan_and_infinite_values_are_skipped_and_counted(qgis_processing, meuse, tmp_path):  # noqa: F811
    layer = point_layer(meuse.xy, {"zinc": meuse.zinc})
    fids = [feature.id() for feature in layer.getFeatures()]
    # Real IEEE NaN and infinity in the double field (not NULL): the provider stores what it is given.
    assert layer.dataProvider().changeAttributeValues({fids[3]: {0: math.nan}, fids[10]: {0: math.inf}})
    stored = [feature.attributes()[0] for feature in layer.getFeatures()]
    assert math.isnan(stored[3]) and stored[10] == math.inf
    before = layer_state(layer)
    log = quick_fit_log(qgis_processing, layer, tmp_path)
    assert "Skipped 2 feature(s) whose zinc is NULL or not a number" in log and "Using 153 samples" in log
    assert layer_state(layer) == before


def test_coincident_points_are_averaged_and_counted(qgis_processing, meuse, tmp_path):  # noqa: F811
    xy = np.vstack([meuse.xy, meuse.xy[:2]])
    zinc = np.concatenate([meuse.zinc, [500.0, 600.0]])
    layer = point_layer(xy, {"zinc": zinc})
    log = quick_fit_log(qgis_processing, layer, tmp_path)
    assert "Averaged 4 samples at 2 shared locations" in log and "Using 155 samples" in log


def test_constant_values_are_refused(run_refused, meuse):
    layer = point_layer(meuse.xy, {"zinc": np.full(len(meuse.xy), 250.0)})
    run_refused("fieldcast:fitmodel", {"INPUT": layer, "FIELD": "zinc"}, "All 155 values equal 250")


def test_fewer_than_three_values_are_refused(run_refused, meuse):
    zinc = np.full(len(meuse.xy), np.nan)
    zinc[:2] = meuse.zinc[:2]
    layer = point_layer(meuse.xy, {"zinc": zinc})
    run_refused("fieldcast:fitmodel", {"INPUT": layer, "FIELD": "zinc"}, "only 2 usable samples")


@pytest.mark.parametrize("bad", [0.0, -5.0])
def test_log_of_zero_or_negative_values_is_refused_with_advice(run_refused, meuse, bad):
    zinc = np.array(meuse.zinc)
    zinc[5] = bad
    layer = point_layer(meuse.xy, {"zinc": zinc})
    run_refused("fieldcast:fitmodel", {"INPUT": layer, "FIELD": "zinc", "TRANSFORM": "log"},
                "The log transform needs values above 0", f"but 1 value(s) are not (smallest {bad:g})",
                f"Set a log offset larger than {0.0 - bad:g}, or use no transform")


# --- working CRS ---------------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def lonlat_layer(meuse) -> QgsVectorLayer:
    # EPSG:28992 -> WGS 84 longitude/latitude with PROJ (via pyproj).
    to_lonlat = Transformer.from_crs("EPSG:28992", "EPSG:4326", always_xy=True)
    lon, lat = to_lonlat.transform(meuse.xy[:, 0], meuse.xy[:, 1])
    return point_layer(np.column_stack([lon, lat]), {"zinc": meuse.zinc}, crs="EPSG:4326")


def test_geographic_layer_is_worked_in_its_utm_zone(qgis_processing, lonlat_layer, tmp_path):  # noqa: F811
    # The Meuse samples lie near 5.7 deg E, 51 deg N: UTM zone 31 north (zones are 6 degrees wide from
    # 180 W; zone 31 spans 0-6 E; Snyder 1987, Map Projections - A Working Manual).
    results, log = run_logged(qgis_processing, "fieldcast:crossvalidate", {
        "INPUT": lonlat_layer, "FIELD": "zinc", "OUTPUT": "memory:"})
    assert "UTM zone 31N" in log and "EPSG:32631" in log
    assert results["OUTPUT"].crs().authid() == "EPSG:32631"  # outputs are in the working CRS


def test_geographic_layer_is_predicted_on_a_utm_grid(qgis_processing, lonlat_layer, tmp_path):  # noqa: F811
    model = str(tmp_path / "m.json")
    qgis_processing.run("fieldcast:fitmodel", {"INPUT": lonlat_layer, "FIELD": "zinc", **QUICK_FIT,
                                               "OUTPUT_MODEL": model})
    qgis_processing.run("fieldcast:predict", {"INPUT": lonlat_layer, "FIELD": "zinc", "MODEL": model,
                                              "PIXEL_SIZE": 200, "OUTPUT": str(tmp_path / "p.tif")})
    dataset = gdal.Open(str(tmp_path / "p.tif"))
    assert same_crs(dataset.GetProjection(), "EPSG:32631")
    assert dataset.GetGeoTransform()[1] == 200.0


def test_target_crs_is_used_when_set(qgis_processing, lonlat_layer, tmp_path):  # noqa: F811
    _, log = run_logged(qgis_processing, "fieldcast:fitmodel", {
        "INPUT": lonlat_layer, "FIELD": "zinc", **QUICK_FIT, "TARGET_CRS": "EPSG:28992",
        "OUTPUT_MODEL": str(tmp_path / "m.json")})
    assert "Amersfoort / RD New (the target CRS you set)" in log


def test_web_mercator_target_crs_is_logged_as_a_warning(qgis_processing, lonlat_layer, tmp_path):  # noqa: F811
    _, log = run_logged(qgis_processing, "fieldcast:fitmodel", {
        "INPUT": lonlat_layer, "FIELD": "zinc", **QUICK_FIT, "TARGET_CRS": "EPSG:3857",
        "OUTPUT_MODEL": str(tmp_path / "m.json")})
    assert "is a web-mapping projection: its distances are stretched by 1/cos(latitude)" in log


def test_geographic_target_crs_is_refused(run_refused, meuse_layer):
    run_refused("fieldcast:fitmodel", {"INPUT": meuse_layer, "FIELD": "zinc", "TARGET_CRS": "EPSG:4326"},
                "is in degrees", "projected CRS")


def test_model_fitted_in_another_crs_is_refused(run_refused, meuse_layer, model_file):
    run_refused("fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_file,
                                      "TARGET_CRS": "EPSG:32631"},
                "fitted in 'Amersfoort / RD New'", "WGS 84 / UTM zone 31N", "Target CRS",
                "EPSG:28992")


# --- model files ---------------------------------------------------------------------------------------------

def test_missing_model_file_is_refused(run_refused, meuse_layer, tmp_path_factory):
    missing = tmp_path_factory.mktemp("no-model") / "missing.json"
    run_refused("fieldcast:crossvalidate", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": str(missing)},
                "Cannot read the model file", "Check the path")


@pytest.mark.parametrize("algorithm", ["fieldcast:predict", "fieldcast:crossvalidate"])
@pytest.mark.parametrize("text, fragment", [
    ("{not json", "not valid JSON"),
    ('{"format": "something else"}', "not a Fieldcast model file"),
])
def test_malformed_model_file_is_refused(run_refused, meuse_layer, tmp_path_factory, text, fragment, algorithm):
    path = tmp_path_factory.mktemp("bad-model") / "model.json"
    path.write_text(text, encoding="utf-8")
    run_refused(algorithm, {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": str(path)}, fragment)
    assert path.read_text(encoding="utf-8") == text


# --- grids ---------------------------------------------------------------------------------------------------

def test_extent_of_zero_area_is_refused(run_refused, meuse_layer, model_file):
    run_refused("fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_file,
                                      "EXTENT": "180000,180000,330000,331000 [EPSG:28992]", "PIXEL_SIZE": 40},
                "zero or negative width (0.0)", "Choose an extent with x_max > x_min and y_max > y_min")


def test_extent_away_from_the_samples_is_refused(run_refused, meuse_layer, model_file):
    run_refused("fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_file,
                                      "EXTENT": "0,1000,0,1000 [EPSG:28992]", "PIXEL_SIZE": 40},
                "does not overlap the samples")


def test_grid_too_large_is_refused_before_allocating(run_refused, meuse_layer, model_file):
    run_refused("fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_file,
                                      "PIXEL_SIZE": 0.01}, "Use a larger pixel size")


@pytest.mark.parametrize("probability", [0.0, 1.0])
def test_interval_probability_at_zero_or_one_is_refused_before_any_fit(run_refused, meuse_layer, tmp_path,
                                                                      probability):
    feedback = QgsProcessingFeedback()
    run_refused("fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "PIXEL_SIZE": 200,
                                      "INTERVAL_PROBABILITY": probability,
                                      "OUTPUT_LOWER": str(tmp_path / "out_lower.tif")},
                "INTERVAL_PROBABILITY) must lie strictly between 0 and 1", "0.9 gives the 5 % and 95 % quantiles",
                feedback=feedback)
    assert "No model file given" not in feedback.textLog()  # refused before the default fit


def test_output_that_is_not_a_geotiff_is_refused(run_refused, meuse_layer, model_file, tmp_path):
    run_refused("fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_file,
                                      "OUTPUT": str(tmp_path / "surface.asc")}, "does not end in .tif")


def test_cancel_during_prediction_leaves_no_file(run_refused, meuse_layer, model_file):
    feedback = CancelAfterFirstProgress(start_percent=30.0)
    run_refused("fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_file,
                                      "PIXEL_SIZE": 20}, "Cancelled", feedback=feedback)
    assert feedback.isCanceled()


def test_model_file_is_left_unchanged_by_predict_and_crossvalidate(qgis_processing, meuse_layer,  # noqa: F811
                                                                  model_file, tmp_path):
    with open(model_file, "rb") as stream:
        before = stream.read()
    qgis_processing.run("fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_file,
                                              "PIXEL_SIZE": 100, "OUTPUT": str(tmp_path / "p.tif")})
    qgis_processing.run("fieldcast:crossvalidate", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_file,
                                                    "OUTPUT": "memory:"})
    with open(model_file, "rb") as stream:
        assert stream.read() == before
    assert leftovers(tmp_path) == ["p.tif"]
