"""Inputs that used to fail late or silently: each gets a message naming the cause and the parameter to change.

Samples are the published Meuse data (tests/data/README.md) in EPSG:28992, changed where a test needs a
particular defect. Every refusal is checked through ``processing.run``: the message, no output file left and
the inputs unchanged (the ``run_refused`` fixture).
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from qgis.core import QgsProcessingFeedback

from qgis_support import fieldcast_plugin, point_layer, polygon_layer, qgis_processing  # noqa: F401 - fixtures
from test_plugin_bad_inputs import (  # noqa: F401 - meuse_layer, model_file and run_refused are fixtures
    QUICK_FIT,
    meuse_layer,
    model_file,
    run_logged,
    run_refused,
)

# --- sample values -------------------------------------------------------------------------------------------

def test_values_whose_squares_overflow_are_refused_with_advice(run_refused, meuse):  # noqa: F811
    zinc = np.array(meuse.zinc) * 1e297  # near 1e300, as in a field stored in the wrong units
    layer = point_layer(meuse.xy, {"zinc": zinc})
    run_refused("fieldcast:fitmodel", {"INPUT": layer, "FIELD": "zinc", **QUICK_FIT},
                "155 sample value(s) are beyond \u00b11e+50", "Rescale the field to larger units")


def test_fifty_thousand_samples_at_one_location_are_averaged(qgis_processing, meuse, tmp_path):  # noqa: F811
    xy = np.vstack([meuse.xy, np.repeat(meuse.xy[:1], 50_000, axis=0)])
    zinc = np.concatenate([meuse.zinc, np.full(50_000, 500.0)])
    layer = point_layer(xy, {"zinc": zinc})
    _, log = run_logged(qgis_processing, "fieldcast:fitmodel", {
        "INPUT": layer, "FIELD": "zinc", **QUICK_FIT, "OUTPUT_MODEL": str(tmp_path / "m.json")})
    assert "Averaged 50001 samples at 1 shared locations" in log and "Using 155 samples" in log


# --- parameter values ----------------------------------------------------------------------------------------

def test_unknown_kernel_is_refused_with_the_allowed_words(run_refused, meuse_layer):  # noqa: F811
    run_refused("fieldcast:fitmodel", {"INPUT": meuse_layer, "FIELD": "zinc", "KERNEL": "foo"},
                "KERNEL (Covariance family) must be one of auto, exponential, spherical, gaussian, matern32, "
                "matern52, matern; got 'foo'", "Set KERNEL to one of these words")


@pytest.mark.parametrize("size", [-1, 0, "-1"])
def test_pixel_size_of_zero_or_less_is_refused_with_advice(run_refused, meuse_layer, model_file, size):  # noqa: F811
    run_refused("fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_file,
                                      "PIXEL_SIZE": size},
                f"PIXEL_SIZE) must be a positive distance in the working CRS's units (e.g. metres); got {size!r}",
                "leave it empty to derive it from the sample spacing")


def test_threshold_without_exceedance_output_is_refused(run_refused, meuse_layer, model_file):  # noqa: F811
    run_refused("fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_file,
                                      "PIXEL_SIZE": 100, "THRESHOLD": 500},
                "A threshold (500) is set but no exceedance raster is asked for, so it would be ignored",
                "OUTPUT_EXCEEDANCE", "leave 'Threshold' (THRESHOLD) empty")


# --- grids ---------------------------------------------------------------------------------------------------

def test_extent_far_wider_than_the_samples_is_refused_before_the_work(run_refused, meuse_layer,  # noqa: F811
                                                                     model_file):  # noqa: F811
    # 24,800 km across for samples spanning about 4.4 km (the Meuse bounding box, meuse.csv).
    feedback = QgsProcessingFeedback()
    run_refused("fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_file,
                                      "EXTENT": "-8000000,9500000,-8000000,9500000 [EPSG:28992]"},
                "The extent is 2.47487e+07 metres across (diagonal)", "times the", "the samples span",
                "Choose an extent at most 10 times the samples'", "leave EXTENT empty", feedback=feedback)
    assert "Grid:" not in feedback.textLog()


def test_extent_ten_times_the_samples_is_accepted(qgis_processing, meuse, meuse_layer, model_file,  # noqa: F811
                                                  tmp_path):
    low, high = meuse.xy.min(axis=0), meuse.xy.max(axis=0)
    centre, half = (low + high) / 2, (high - low) * 4.9
    extent = f"{centre[0] - half[0]},{centre[0] + half[0]},{centre[1] - half[1]},{centre[1] + half[1]} [EPSG:28992]"
    qgis_processing.run("fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_file,
                                              "EXTENT": extent, "PIXEL_SIZE": 1000, "OUTPUT": str(tmp_path / "p.tif")})
    assert (tmp_path / "p.tif").exists()


# --- masks ---------------------------------------------------------------------------------------------------

MEUSE_SQUARE = "POLYGON((179000 330000, 182000 330000, 182000 334000, 179000 334000, 179000 330000))"


@pytest.mark.parametrize(("mask", "fragments"), [
    (polygon_layer([MEUSE_SQUARE], crs=None), ("The layer site (MASK) has no defined CRS", "Assign its real CRS")),
    (polygon_layer([]), ("The mask site (MASK) holds no polygons", "leave MASK empty")),
    (polygon_layer(["POLYGON((0 0, 10 0, 10 10, 0 10, 0 0))"]),
     ("The mask site (MASK) lies outside the grid: its polygons span 0, 0, 10, 10", "has its real CRS")),
])
def test_masks_that_keep_no_cell_are_refused_with_the_reason(run_refused, meuse_layer, model_file, mask,  # noqa: F811
                                                             fragments):
    run_refused("fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_file,
                                      "PIXEL_SIZE": 100, "MASK": mask}, *fragments)


# --- model files of the campaign ----------------------------------------------------------------------------

def with_mean(kind: str, known_value: float):
    def change(document: dict) -> None:
        document["mean"].update(kind=kind, known_value=known_value, coefficients=[])
    return change


@pytest.mark.parametrize("algorithm", ["fieldcast:predict", "fieldcast:crossvalidate"])
@pytest.mark.parametrize(("change", "fragments"), [
    (lambda document: document["structures"][0].update(azimuth=float("nan")),
     ("structures[0].azimuth = nan", "a finite number of degrees")),
    (with_mean("known", float("nan")), ("mean.known_value = nan", "a finite number")),
    (lambda document: document["structures"][0].update(partial_sill=1e300),
     ("structures[0].partial_sill = 1e+300", "at most 1e+100")),
    (lambda document: document.update(format_version="abc"), ('format_version = "abc"', "a whole number")),
], ids=["nan-azimuth", "nan-known-mean", "huge-partial-sill", "text-format-version"])
def test_model_files_the_campaign_broke_are_refused_naming_key_and_value(run_refused, meuse_layer, model_file,  # noqa: F811
                                                                       tmp_path, algorithm, change, fragments):
    # Each used to run: a constant map (NaN azimuth), all-nodata rasters reported as success, or a crash.
    document = json.loads(Path(model_file).read_text(encoding="utf-8"))
    change(document)
    broken = tmp_path / "broken.json"
    broken.write_text(json.dumps(document), encoding="utf-8")  # json.dumps writes NaN as the literal NaN
    run_refused(algorithm, {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": str(broken)},
                "The model file broken.json has", *fragments, "Refit the model with 'Fit covariance model'")


# --- rasters that would be nodata ----------------------------------------------------------------------------

def test_variance_beyond_float32_everywhere_is_refused(run_refused, meuse_layer, model_file, tmp_path):  # noqa: F811
    # A partial sill of 1e50 ppm^2 (accepted: at most 1e100) makes kriging variances far beyond the Float32
    # range (about 3.4e38, IEEE 754 single precision) at every cell: the variance raster would hold no value.
    document = json.loads(Path(model_file).read_text(encoding="utf-8"))
    document["structures"][0]["partial_sill"] = 1e50
    huge = tmp_path / "huge.json"
    huge.write_text(json.dumps(document), encoding="utf-8")
    run_refused("fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": str(huge), "PIXEL_SIZE": 100},
                "The zinc variance raster(s) would be nodata at every cell", "Float32 GeoTIFF",
                "Check the model's sill and partial sills")


def test_variance_beyond_float32_at_most_cells_is_warned_about(qgis_processing, meuse_layer, model_file,  # noqa: F811
                                                                tmp_path):
    # A partial sill of 1e39 ppm^2 with a 20 m range and no nugget: kriging variances stay small at the cells
    # next to a sample but reach the sill, beyond the Float32 range (about 3.4e38, IEEE 754 single precision),
    # at most cells away from them, which the variance raster then holds as nodata.
    document = json.loads(Path(model_file).read_text(encoding="utf-8"))
    document["structures"][0].update(partial_sill=1e39, range=20.0)
    document["nugget"] = 0.0
    steep = tmp_path / "steep.json"
    steep.write_text(json.dumps(document), encoding="utf-8")
    feedback = QgsProcessingFeedback()
    qgis_processing.run("fieldcast:predict", {
        "INPUT": meuse_layer, "FIELD": "zinc", "MODEL": str(steep), "PIXEL_SIZE": 100,
        "OUTPUT": str(tmp_path / "zinc.tif"), "OUTPUT_VARIANCE": str(tmp_path / "variance.tif")}, feedback=feedback)
    assert "The zinc variance raster is nodata at" in feedback.textLog()
    assert "The zinc prediction raster is nodata at" not in feedback.textLog()


@pytest.mark.parametrize("neighbours", [-1, 2.5])
def test_neighbours_that_are_not_whole_numbers_from_0_are_refused(run_refused, meuse_layer, model_file,  # noqa: F811
                                                                  neighbours):
    run_refused("fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_file,
                                      "PIXEL_SIZE": 100, "NEIGHBOURS": neighbours},
                f"NEIGHBOURS must be a whole number of 0 or more; got {neighbours!r}")


def test_neighbours_beyond_two_to_the_31_are_taken_whole(qgis_processing, meuse_layer, model_file,  # noqa: F811
                                                         tmp_path):
    # 4294967298 = 2**32 + 2 used to be read as 2 neighbours, silently; taken whole it means every sample.
    _, log = run_logged(qgis_processing, "fieldcast:predict", {
        "INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_file, "PIXEL_SIZE": 100, "NEIGHBOURS": 4_294_967_298,
        "OUTPUT": str(tmp_path / "p.tif")})
    assert "Local kriging: each cell from its 155 nearest" in log
