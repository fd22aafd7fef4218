"""fieldcast:simulate on the published Meuse data: realisations, their summaries, the area table, bad inputs.

Data: the Meuse topsoil samples and 40 m grid (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp
package; tests/data/README.md), EPSG:28992 metres, zinc in ppm, log model; an 80 m grid over the published
grid's extent, masked to the 80 m cells that hold it (see tests/test_plugin_decision_maps.py).
"""
from __future__ import annotations

import csv
import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
from osgeo import gdal
from qgis.core import (
    QgsApplication,
    QgsProcessingException,
    QgsProcessingFeedback,
)

from fieldcast.algorithms.io.area_words import area_words
from fieldcast.algorithms.io.crs import same_crs
from qgis_process_support import QGIS_PROCESS, make_profile, run_algorithm, write_meuse_geopackage
from qgis_support import CancelAfterFirstProgress, fieldcast_plugin, point_layer, qgis_processing  # noqa: F401
from requirements_check import skip_unless_available
from test_plugin_decision_maps import (  # noqa: F401 - zinc_model is a fixture
    COARSE_CELL,
    COARSE_GRID,
    ZINC_THRESHOLD,
    coarse_cell_index,
    grid_parameters,
    zinc_model,
)
from test_plugin_few_samples import WarningFeedback

REALISATIONS = 50
SUMMARY_RASTERS = ("OUTPUT_MEAN", "OUTPUT_STDDEV", "OUTPUT_EXCEEDANCE", "OUTPUT_P10", "OUTPUT_P90")


@dataclass
class SimulationRun:
    realisations: np.ndarray  # (R, rows, cols), nodata as NaN
    dataset: gdal.Dataset
    summaries: dict[str, np.ndarray]
    table: list[dict[str, str]]
    results: dict
    log: str
    predicted_exceedance: np.ndarray


def bands(path: str) -> tuple[np.ndarray, gdal.Dataset]:
    """Every band of a GeoTIFF as float64 (bands, rows, cols) with nodata as NaN, and the dataset."""
    dataset = gdal.Open(str(path))
    values = dataset.ReadAsArray().astype(float).reshape(dataset.RasterCount, dataset.RasterYSize, -1)
    values[values == dataset.GetRasterBand(1).GetNoDataValue()] = np.nan
    return values, dataset


@pytest.fixture(scope="module")
def simulation(qgis_processing, meuse, meuse_grid, zinc_model, tmp_path_factory) -> SimulationRun:  # noqa: F811
    folder = tmp_path_factory.mktemp("simulate")
    outputs = {name: str(folder / f"{name.lower()}.tif") for name in ("OUTPUT", *SUMMARY_RASTERS)}
    feedback = QgsProcessingFeedback()
    results = qgis_processing.run("fieldcast:simulate", {
        **grid_parameters(meuse, meuse_grid, zinc_model), "REALIZATIONS": REALISATIONS, "SEED": 7,
        "THRESHOLD": ZINC_THRESHOLD, **outputs, "OUTPUT_TABLE": str(folder / "areas.csv")}, feedback=feedback)
    qgis_processing.run("fieldcast:predict", {
        **grid_parameters(meuse, meuse_grid, zinc_model), "THRESHOLD": ZINC_THRESHOLD,
        "OUTPUT": str(folder / "predicted.tif"), "OUTPUT_EXCEEDANCE": str(folder / "predicted_exceedance.tif")})
    realisations, dataset = bands(outputs["OUTPUT"])
    with open(folder / "areas.csv", newline="", encoding="utf-8") as handle:
        table = list(csv.DictReader(handle))
    return SimulationRun(realisations, dataset, {name: bands(outputs[name])[0][0] for name in SUMMARY_RASTERS},
                         table, results, feedback.textLog(), bands(folder / "predicted_exceedance.tif")[0][0])


def test_one_band_per_realisation_in_the_working_crs_on_the_masked_grid(simulation, meuse_grid):
    assert simulation.dataset.RasterCount == REALISATIONS
    assert same_crs(simulation.dataset.GetProjection(), "EPSG:28992")
    assert simulation.dataset.GetGeoTransform() == COARSE_GRID.geotransform
    expected = np.zeros(COARSE_GRID.n_cells, bool)
    expected[coarse_cell_index(meuse_grid.xy)] = True  # the 80 m cells that hold the published grid
    for realisation in simulation.realisations:
        assert np.array_equal(np.isfinite(realisation).ravel(), expected)
    # Zinc is positive; a log model back-transformed cell by cell keeps every simulated value above 0.
    assert np.nanmin(simulation.realisations) > 0.0
    assert simulation.dataset.GetMetadataItem("fieldcast_seed") == "7"


def test_summaries_are_those_of_the_written_realisations(simulation):
    stack = simulation.realisations
    inside = np.isfinite(stack[0])
    tolerance = {"rtol": 1e-5}  # Float32 storage
    np.testing.assert_allclose(simulation.summaries["OUTPUT_MEAN"][inside], stack.mean(axis=0)[inside], **tolerance)
    np.testing.assert_allclose(simulation.summaries["OUTPUT_STDDEV"][inside], stack.std(axis=0, ddof=1)[inside],
                               **tolerance)
    # numpy's default (linear interpolation) percentiles, as the summaries state
    p10, p90 = np.percentile(stack, [10, 90], axis=0)
    np.testing.assert_allclose(simulation.summaries["OUTPUT_P10"][inside], p10[inside], **tolerance)
    np.testing.assert_allclose(simulation.summaries["OUTPUT_P90"][inside], p90[inside], **tolerance)
    share = (stack > ZINC_THRESHOLD).mean(axis=0)
    assert np.max(np.abs(simulation.summaries["OUTPUT_EXCEEDANCE"][inside] - share[inside])) <= 1.0 / REALISATIONS
    for summary in simulation.summaries.values():
        assert np.array_equal(np.isfinite(summary), inside)


def test_table_has_the_area_above_the_threshold_and_the_mean_of_each_realisation(simulation):
    stack = simulation.realisations
    inside = np.isfinite(stack[0])
    mask_area = np.count_nonzero(inside) * COARSE_CELL ** 2
    assert [int(row["realisation"]) for row in simulation.table] == list(range(1, REALISATIONS + 1))
    areas = np.array([float(row["area_above"]) for row in simulation.table])
    assert np.all((areas >= 0.0) & (areas <= mask_area))
    counted = np.array([np.count_nonzero(band[inside] > ZINC_THRESHOLD) for band in stack]) * COARSE_CELL ** 2
    # The raster holds Float32 values; a value within Float32 rounding of 500 could count differently.
    assert np.max(np.abs(areas - counted)) <= COARSE_CELL ** 2
    means = np.array([float(row["mask_mean"]) for row in simulation.table])
    np.testing.assert_allclose(means, [band[inside].mean() for band in stack], rtol=1e-6)
    # Realisations differ, so the area to act on has a spread.
    assert np.ptp(areas) > 0


def test_area_percentiles_are_returned_and_logged(simulation):
    areas = np.array([float(row["area_above"]) for row in simulation.table])
    expected = np.percentile(areas, [10, 50, 90])
    found = [simulation.results[name] for name in ("AREA_P10", "AREA_P50", "AREA_P90")]
    np.testing.assert_allclose(found, expected)
    assert found[0] <= found[1] <= found[2]
    # Meuse areas in metres squared are logged in hectares (1 ha = 10,000 m^2) or m^2 below one hectare.
    assert f"P10 {area_words(expected[0], 'metre')}" in simulation.log
    assert f"P90 {area_words(expected[2], 'metre')}" in simulation.log
    assert "square metre" not in simulation.log
    assert "circulant embedding" in simulation.log


def test_share_above_agrees_with_the_kriging_exceedance_probability(simulation):
    # Each cell's realisations follow the kriging distribution of the log value (conditioning by kriging,
    # Journel & Huijbregts 1978), so the share above 500 ppm estimates predict's exceedance probability p
    # with standard error sqrt(p (1 - p) / R) <= 0.5 / sqrt(50) = 0.071 (binomial proportion); the mean absolute
    # difference over cells is then at most about 0.071 in expectation (Jensen), below 0.1.
    share = simulation.summaries["OUTPUT_EXCEEDANCE"]
    inside = np.isfinite(share)
    assert np.array_equal(inside, np.isfinite(simulation.predicted_exceedance))
    assert np.mean(np.abs(share[inside] - simulation.predicted_exceedance[inside])) < 0.1


def test_the_same_seed_gives_the_same_fields(qgis_processing, meuse, meuse_grid, zinc_model, tmp_path):  # noqa: F811
    paths = [tmp_path / f"run{index}.tif" for index in range(2)]
    for path in paths:
        qgis_processing.run("fieldcast:simulate", {**grid_parameters(meuse, meuse_grid, zinc_model),
                                                   "REALIZATIONS": 3, "SEED": 11, "OUTPUT": str(path)})
    first, second = (bands(path)[0] for path in paths)
    assert first.shape[0] == 3
    np.testing.assert_array_equal(first, second)


def test_local_conditioning_writes_bands_and_counts_nodata(qgis_processing, meuse, meuse_grid, zinc_model,  # noqa: F811
                                                           tmp_path):
    # NEIGHBOURS=16 (common practice): every masked cell is conditioned and written, as with all samples.
    feedback = QgsProcessingFeedback()
    qgis_processing.run("fieldcast:simulate", {**grid_parameters(meuse, meuse_grid, zinc_model), "REALIZATIONS": 4,
                                               "SEED": 5, "NEIGHBOURS": 16, "OUTPUT": str(tmp_path / "local.tif")},
                        feedback=feedback)
    local, dataset = bands(tmp_path / "local.tif")
    assert dataset.RasterCount == 4
    expected = np.zeros(COARSE_GRID.n_cells, bool)
    expected[coarse_cell_index(meuse_grid.xy)] = True
    for realisation in local:
        assert np.array_equal(np.isfinite(realisation).ravel(), expected)
    assert np.nanmin(local) > 0.0
    assert "each cell on its 16 nearest samples" in feedback.textLog()
    assert "Local conditioning: nearby cells share one neighbour search where it holds each cell's own" in \
        feedback.textLog()
    assert "nodata in every realisation" not in feedback.textLog()
    # A 100 m search leaves some masked cells with fewer than 2 samples in range: nodata in every band, logged,
    # and left out of the mean raster.
    feedback = QgsProcessingFeedback()
    qgis_processing.run("fieldcast:simulate", {
        **grid_parameters(meuse, meuse_grid, zinc_model), "REALIZATIONS": 4, "SEED": 5, "NEIGHBOURS": 16,
        "SEARCH_RADIUS": 100.0, "OUTPUT": str(tmp_path / "near.tif"), "OUTPUT_MEAN": str(tmp_path / "mean.tif")},
        feedback=feedback)
    near = bands(tmp_path / "near.tif")[0]
    unresolved = expected.reshape(near.shape[1:]) & np.isnan(near[0])
    assert unresolved.any() and np.isnan(near[:, unresolved]).all()
    assert f"{int(unresolved.sum()):,} cell(s) are nodata in every realisation" in feedback.textLog()
    assert np.array_equal(np.isfinite(bands(tmp_path / "mean.tif")[0][0]), np.isfinite(near[0]))


# --- bad inputs: a clear message and no file at all --------------------------------------------------------------

def refused(processing, parameters: dict, folder, feedback=None) -> str:
    """Run fieldcast:simulate with every output in ``folder``; it must fail and leave ``folder`` empty."""
    outputs = {name: str(folder / f"{name.lower()}.tif") for name in ("OUTPUT", *SUMMARY_RASTERS)}
    with pytest.raises(QgsProcessingException) as error:
        processing.run("fieldcast:simulate", {**parameters, **outputs, "OUTPUT_TABLE": str(folder / "areas.csv")},
                       feedback=feedback or QgsProcessingFeedback())
    assert list(folder.iterdir()) == []
    return str(error.value)


def test_fewer_than_one_realisation_is_refused(qgis_processing, meuse, meuse_grid, zinc_model, tmp_path):  # noqa: F811
    message = refused(qgis_processing, {**grid_parameters(meuse, meuse_grid, zinc_model), "REALIZATIONS": 0,
                                        "THRESHOLD": ZINC_THRESHOLD}, tmp_path)
    assert "REALIZATIONS (number of realisations) must be a whole number from 1 to 65,535; got 0" in message


@pytest.mark.parametrize("count", [65_536, 4_294_967_298, "4294967298", 2.5])
def test_realisations_beyond_the_bands_of_a_geotiff_are_refused_as_given(qgis_processing, meuse, meuse_grid,  # noqa: F811
                                                                        zinc_model, tmp_path, count):  # noqa: F811
    # 4294967298 = 2**32 + 2 used to be read as 0 ("got 0"); a GeoTIFF holds at most 65,535 bands (16-bit
    # SamplesPerPixel, TIFF 6.0 specification). Refused before any work, with the number as given.
    feedback = QgsProcessingFeedback()
    message = refused(qgis_processing, {**grid_parameters(meuse, meuse_grid, zinc_model), "REALIZATIONS": count,
                                        "THRESHOLD": ZINC_THRESHOLD}, tmp_path, feedback)
    assert f"from 1 to 65,535; got {count!r}" in message and "Set REALIZATIONS" in message
    assert "Simulating" not in feedback.textLog()


def test_seeds_from_two_to_the_31_are_taken_whole(qgis_processing, meuse, meuse_grid, zinc_model,  # noqa: F811
                                                  tmp_path):
    # Seeds 2**31 and 2**32 + 2 used to become 0 and give the fields of seed 0; text is read as qgis_process
    # passes it. numpy's default_rng takes any non-negative integer, so each seed gives its own fields.
    seeds = {"zero": 0, "big": 2**31, "bigger": 4_294_967_298, "text": "4294967298"}
    fields = {}
    for name, seed in seeds.items():
        path = tmp_path / f"{name}.tif"
        feedback = QgsProcessingFeedback()
        qgis_processing.run("fieldcast:simulate", {**grid_parameters(meuse, meuse_grid, zinc_model),
                                                   "REALIZATIONS": 2, "SEED": seed, "OUTPUT": str(path)},
                            feedback=feedback)
        assert f"(seed {int(seed)})" in feedback.textLog()
        fields[name] = bands(path)[0]
    assert not np.array_equal(fields["zero"], fields["big"], equal_nan=True)
    assert not np.array_equal(fields["big"], fields["bigger"], equal_nan=True)
    np.testing.assert_array_equal(fields["bigger"], fields["text"])


@pytest.mark.parametrize("seed", [-1, 1.5, "abc"])
def test_seeds_that_are_not_whole_numbers_from_0_are_refused(qgis_processing, meuse, meuse_grid,  # noqa: F811
                                                            zinc_model, tmp_path, seed):  # noqa: F811
    message = refused(qgis_processing, {**grid_parameters(meuse, meuse_grid, zinc_model), "REALIZATIONS": 3,
                                        "SEED": seed, "THRESHOLD": ZINC_THRESHOLD}, tmp_path)
    assert f"SEED (random seed) must be a whole number of 0 or more; got {seed!r}" in message



def test_realisations_beyond_float32_everywhere_are_refused(qgis_processing, meuse, meuse_grid, zinc_model,  # noqa: F811
                                                           tmp_path_factory):
    # A partial sill of 1e90 (accepted: at most 1e100) without transform gives realisations beyond the Float32
    # range (about 3.4e38, IEEE 754 single precision) in every cell: the rasters would hold no value.
    document = json.loads(Path(zinc_model).read_text(encoding="utf-8"))
    document["structures"][0]["partial_sill"] = 1e90
    document["transform"] = {"kind": "none", "offset": 0.0}
    huge = tmp_path_factory.mktemp("huge-model") / "huge.json"
    huge.write_text(json.dumps(document), encoding="utf-8")
    message = refused(qgis_processing, {**grid_parameters(meuse, meuse_grid, str(huge)), "REALIZATIONS": 3,
                                        "THRESHOLD": ZINC_THRESHOLD}, tmp_path_factory.mktemp("huge-out"))
    assert "The zinc realisations" in message and "would be nodata at every cell" in message
    assert "Float32 GeoTIFF" in message

def test_one_neighbour_is_refused(qgis_processing, meuse, meuse_grid, zinc_model, tmp_path):  # noqa: F811
    message = refused(qgis_processing, {**grid_parameters(meuse, meuse_grid, zinc_model), "REALIZATIONS": 5,
                                        "NEIGHBOURS": 1, "THRESHOLD": ZINC_THRESHOLD}, tmp_path)
    assert "NEIGHBOURS is 1" in message and "Set NEIGHBOURS to 2 or more" in message


def test_exceedance_share_without_threshold_is_refused(qgis_processing, meuse, meuse_grid, zinc_model,  # noqa: F811
                                                       tmp_path):
    message = refused(qgis_processing, {**grid_parameters(meuse, meuse_grid, zinc_model), "REALIZATIONS": 5},
                      tmp_path)
    assert "needs a threshold" in message


def test_grid_too_big_for_memory_is_refused_before_simulating(qgis_processing, meuse, zinc_model,  # noqa: F811
                                                              tmp_path):
    # 1 m cells over the samples' extent: about 2800 x 3900 cells x 100 realisations x 8 bytes, over 8 GB.
    feedback = QgsProcessingFeedback()
    message = refused(qgis_processing, {"INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc",
                                        "MODEL": zinc_model, "PIXEL_SIZE": 1.0, "REALIZATIONS": 100,
                                        "THRESHOLD": ZINC_THRESHOLD}, tmp_path, feedback)
    assert "of memory" in message and "fewer realisations" in message and "larger pixel size" in message
    assert "Unconditional fields by" not in feedback.textLog()


def test_cancel_during_simulation_leaves_no_file(qgis_processing, meuse, meuse_grid, zinc_model, tmp_path):  # noqa: F811
    feedback = CancelAfterFirstProgress(start_percent=6.0)
    message = refused(qgis_processing, {**grid_parameters(meuse, meuse_grid, zinc_model), "REALIZATIONS": 20,
                                        "THRESHOLD": ZINC_THRESHOLD}, tmp_path, feedback)
    assert "Cancelled" in message and feedback.isCanceled()


# --- qgis_process ---------------------------------------------------------------------------------------------

@skip_unless_available(QGIS_PROCESS is not None, "qgis_process.bin is not installed")
def test_qgis_process_writes_a_band_per_realisation(zinc_model, tmp_path_factory):  # noqa: F811
    folder = tmp_path_factory.mktemp("simulate-qgis-process")
    samples = write_meuse_geopackage(folder / "meuse.gpkg")
    output = folder / "realisations.tif"
    run = run_algorithm(make_profile(folder / "profile"), "fieldcast:simulate", {
        "INPUT": samples, "FIELD": "zinc", "MODEL": zinc_model, "PIXEL_SIZE": 200, "REALIZATIONS": 20,
        "SEED": 3, "THRESHOLD": ZINC_THRESHOLD, "OUTPUT": output})
    assert run.returncode == 0, run.messages
    dataset = gdal.Open(str(output))
    assert dataset.RasterCount == 20
    assert same_crs(dataset.GetProjection(), "EPSG:28992")
    assert dataset.GetGeoTransform()[1] == 200.0


def test_help_explains_realisations(fieldcast_plugin):  # noqa: F811
    help_text = QgsApplication.processingRegistry().algorithmById("fieldcast:simulate").shortHelpString()
    for phrase in ("equally plausible fields", "uncertainty of areas and totals", "not a certainty",
                   "CRS units squared", "same seed", "local kriging weights"):
        assert phrase in help_text


def test_an_enlarged_embedding_is_information_not_a_warning(qgis_processing, meuse, meuse_grid, zinc_model,  # noqa: F811
                                                             tmp_path):
    # A Gaussian covariance of 800 m range on the 80 m lattice: the minimal torus has slightly negative
    # eigenvalues and a larger one has none (tests/simulate/test_circulant.py), so the padding grows and the
    # fields stay exact: something to say, nothing to warn about.
    document = json.loads(Path(zinc_model).read_text(encoding="utf-8"))
    document["structures"][0].update(family="gaussian", range=800.0)
    smooth = tmp_path / "smooth.json"
    smooth.write_text(json.dumps(document), encoding="utf-8")
    feedback = WarningFeedback()
    qgis_processing.run("fieldcast:simulate", {**grid_parameters(meuse, meuse_grid, str(smooth)), "REALIZATIONS": 2,
                                               "SEED": 1, "OUTPUT": str(tmp_path / "sims.tif")}, feedback=feedback)
    assert "the padding was enlarged" in feedback.textLog()
    assert not any("padding" in warning or "eigenvalues" in warning for warning in feedback.warnings)
