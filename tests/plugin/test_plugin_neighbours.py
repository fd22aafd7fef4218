"""Local neighbourhoods in 'Predict surface' and 'Cross-validate model' (NEIGHBOURS, SEARCH_RADIUS), tiled writing.

Data: the published Meuse topsoil samples (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp package;
tests/data/README.md), EPSG:28992 metres, log(zinc). The algorithms run in-process through ``processing.run``.
"""
from __future__ import annotations

import re

import numpy as np
import pytest
from osgeo import gdal
from qgis.core import NULL, QgsProcessingException, QgsProcessingFeedback
from scipy.spatial import cKDTree

from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.io.model_file import ModelDocument
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict import choice
from fieldcast.algorithms.predict import grid_surfaces as surface
from fieldcast.algorithms.predict.crossval import local_leave_one_out
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.predict.local import LocalKrigingPredictor
from fieldcast.algorithms.predict.neighbourhood_check import CHECK_TARGETS, grid_targets, neighbourhood_gap
from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures

EXTENT = "178440,181560,329600,333760 [EPSG:28992]"
PIXEL = 80.0


@pytest.fixture(scope="module")
def zinc(qgis_processing, meuse, tmp_path_factory):  # noqa: F811
    """The samples layer and an isotropic exponential log(zinc) model file fitted by fieldcast:fitmodel."""
    folder = tmp_path_factory.mktemp("neighbours")
    layer = point_layer(meuse.xy, {"zinc": meuse.zinc})
    fit = qgis_processing.run("fieldcast:fitmodel", {
        "INPUT": layer, "FIELD": "zinc", "TRANSFORM": "log", "KERNEL": "exponential", "ANISOTROPY": False,
        "TREND": "constant", "METHOD": "reml", "OUTPUT_MODEL": str(folder / "zinc.json")})
    return layer, fit["OUTPUT_MODEL"], folder


def predict(processing, zinc, name: str, feedback=None, **extra) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Run fieldcast:predict over every cell of the extent; (prediction, variance, cell centres), nodata as NaN."""
    layer, model, folder = zinc
    processing.run("fieldcast:predict", {
        "INPUT": layer, "FIELD": "zinc", "MODEL": model, "EXTENT": EXTENT, "PIXEL_SIZE": PIXEL,
        "OUTPUT": str(folder / f"{name}.tif"), "OUTPUT_VARIANCE": str(folder / f"{name}_var.tif"),
        "MAP_AREA": "extent", **extra},
        feedback=feedback)
    bands = []
    for path in (folder / f"{name}.tif", folder / f"{name}_var.tif"):
        dataset = gdal.Open(str(path))
        values = dataset.GetRasterBand(1).ReadAsArray().astype(float).ravel()
        values[values == dataset.GetRasterBand(1).GetNoDataValue()] = np.nan
        bands.append(values)
    x0, dx, _, y0, _, dy = dataset.GetGeoTransform()
    cols, rows = np.meshgrid(np.arange(dataset.RasterXSize), np.arange(dataset.RasterYSize))
    centres = np.column_stack([x0 + (cols.ravel() + 0.5) * dx, y0 + (rows.ravel() + 0.5) * dy])
    return bands[0], bands[1], centres


def read_band(path: str) -> np.ndarray:
    """Band 1 of a raster as stored (the dataset is kept open while the band is read)."""
    dataset = gdal.Open(path)
    return dataset.GetRasterBand(1).ReadAsArray()


def back_transformed(mean: np.ndarray, variance: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Median back-transform and lognormal variance, rounded to Float32 as stored."""
    log = Transform("log")
    return (log.back_median(mean).astype(np.float32).astype(float),
            log.back_variance(mean, variance).astype(np.float32).astype(float))


def test_neighbours_k_is_the_engine_local_kriging(qgis_processing, zinc, meuse):  # noqa: F811
    feedback = QgsProcessingFeedback()
    prediction, variance, centres = predict(qgis_processing, zinc, "local16", feedback, NEIGHBOURS=16)
    document = ModelDocument.load(zinc[1])
    engine = LocalKrigingPredictor(meuse.xy, np.log(meuse.zinc), document.covariance, document.mean, neighbours=16)
    expected, expected_variance = back_transformed(*engine.predict(centres))
    np.testing.assert_allclose(prediction, expected, rtol=1e-6)
    np.testing.assert_allclose(variance, expected_variance, rtol=1e-5)
    assert ("Local kriging: each cell from its 16 nearest samples (nearby cells share one neighbour search where it "
            "holds each cell's own 4 nearest)." in feedback.textLog())


def test_local_runs_report_how_far_they_are_from_global_kriging(qgis_processing, zinc, meuse):  # noqa: F811
    feedback = QgsProcessingFeedback()
    predict(qgis_processing, zinc, "gap16", feedback, NEIGHBOURS=16)
    document = ModelDocument.load(zinc[1])
    values = np.log(meuse.zinc)
    local = LocalKrigingPredictor(meuse.xy, values, document.covariance, document.mean, neighbours=16)
    grid = GridSpec.from_extent(178440.0, 329600.0, 181560.0, 333760.0, PIXEL)  # the grid of the run
    gap = neighbourhood_gap(local, meuse.xy, values, grid_targets(grid, None))
    assert gap.targets == CHECK_TARGETS
    assert (f"at {CHECK_TARGETS} cells drawn at random, local kriging differs from kriging with all 155 samples by "
            f"up to {gap.prediction:.1%} of the field's standard deviation (square root of the sill) in the "
            f"prediction and {gap.variance:.1%} of the sill in the variance"
            in feedback.textLog())


def test_local_cells_solve_the_ordinary_kriging_system_of_their_nearest_samples(qgis_processing, zinc, meuse):  # noqa: F811
    # Ordinary kriging system with a Lagrange multiplier (Cressie 1993, Statistics for Spatial Data, rev. ed.,
    # section 3.2), solved here with numpy on each cell's neighbourhood: k samples that hold its 4 nearest
    # (isotropic model: Euclidean nearest; shared neighbourhoods, tests/predict/test_shared_neighbourhoods.py).
    k = 12
    prediction, _, centres = predict(qgis_processing, zinc, "local12", NEIGHBOURS=k)
    document = ModelDocument.load(zinc[1])
    values = np.log(meuse.zinc)
    sets, _ = LocalKrigingPredictor(meuse.xy, values, document.covariance, document.mean,
                                    neighbours=k).weights(centres[::97])
    _, nearest = cKDTree(meuse.xy).query(centres[::97], k=4)
    for centre, cell, chosen, own in zip(centres[::97], prediction[::97], sets, nearest):
        assert set(own.tolist()) <= set(chosen.tolist())
        system = np.ones((k + 1, k + 1))
        system[:k, :k] = document.covariance.data_covariance(meuse.xy[chosen])
        system[k, k] = 0.0
        right = np.append(document.covariance.cross_covariance(meuse.xy[chosen], centre[None, :])[:, 0], 1.0)
        weights = np.linalg.solve(system, right)[:k]
        assert cell == pytest.approx(np.exp(weights @ values[chosen]), rel=1e-6)


def test_neighbours_zero_is_global_kriging(qgis_processing, zinc, meuse):  # noqa: F811
    prediction, variance, centres = predict(qgis_processing, zinc, "global", NEIGHBOURS=0)
    document = ModelDocument.load(zinc[1])
    engine = KrigingPredictor(meuse.xy, np.log(meuse.zinc), document.covariance, document.mean)
    expected, expected_variance = back_transformed(*engine.predict(centres))
    np.testing.assert_allclose(prediction, expected, rtol=1e-6)
    np.testing.assert_allclose(variance, expected_variance, rtol=1e-5)


def test_neighbours_zero_above_the_global_limit_uses_64_and_says_so(qgis_processing, zinc, meuse, monkeypatch):  # noqa: F811
    monkeypatch.setattr(choice, "GLOBAL_SAMPLE_LIMIT", 100)  # Meuse's 155 samples stand in for > 5,000
    feedback = QgsProcessingFeedback()
    prediction, _, centres = predict(qgis_processing, zinc, "automatic", feedback)
    document = ModelDocument.load(zinc[1])
    engine = LocalKrigingPredictor(meuse.xy, np.log(meuse.zinc), document.covariance, document.mean, neighbours=64)
    np.testing.assert_allclose(prediction, back_transformed(*engine.predict(centres))[0], rtol=1e-6)
    assert "each cell uses its 64 nearest samples instead" in feedback.textLog()


def test_a_search_radius_below_the_spacing_leaves_counted_nodata(qgis_processing, zinc, meuse):  # noqa: F811
    feedback = QgsProcessingFeedback()
    prediction, variance, centres = predict(qgis_processing, zinc, "radius", feedback, NEIGHBOURS=8,
                                            SEARCH_RADIUS=60.0)
    document = ModelDocument.load(zinc[1])
    engine = LocalKrigingPredictor(meuse.xy, np.log(meuse.zinc), document.covariance, document.mean, neighbours=8,
                                   search_radius=60.0)
    engine.predict(centres)
    empty = int(np.count_nonzero(np.isnan(prediction)))
    assert 0 < empty < len(prediction) and empty == engine.last_unresolved
    assert np.array_equal(np.isnan(prediction), np.isnan(variance))
    assert f"{empty:,} cell(s) are nodata" in feedback.textLog()


def gaussian_model_file(zinc, range_m: float, name: str) -> tuple[ModelDocument, str]:
    """The fitted zinc model turned into a Gaussian correlation without nugget at ``range_m``, saved as ``name``."""
    document = ModelDocument.load(zinc[1])
    document.covariance = CovarianceModel((Structure("gaussian", document.covariance.sill, range_m),), 0.0)
    path = str(zinc[2] / name)
    document.save(path)
    return document, path


def test_singular_neighbour_systems_leave_counted_nodata_with_advice(qgis_processing, zinc, meuse):  # noqa: F811
    # A Gaussian correlation without nugget and a 1,000 m range makes most 64-sample neighbour matrices numerically
    # singular (tests/predict/test_factorisation_policy.py): those cells become nodata, the run goes on.
    document, path = gaussian_model_file(zinc, 1000.0, "gaussian.json")
    feedback = QgsProcessingFeedback()
    prediction, variance, centres = predict(qgis_processing, (zinc[0], path, zinc[2]), "gaussian", feedback,
                                            NEIGHBOURS=64)
    engine = LocalKrigingPredictor(meuse.xy, np.log(meuse.zinc), document.covariance, document.mean, neighbours=64)
    engine.predict(centres)
    log = feedback.textLog()
    found = re.search(r"([0-9,]+) cell\(s\) are nodata: the covariance matrix of their neighbours is numerically "
                      r"singular\. Refit with a less smooth family", log)
    singular = int(found.group(1).replace(",", ""))
    assert singular == engine.singular_targets
    # Nodata also holds the back-transforms too large for Float32 (the model's far excursions at resolved cells).
    assert 0 < singular <= np.count_nonzero(np.isnan(prediction)) == np.count_nonzero(np.isnan(variance))


def test_global_kriging_logs_an_ill_conditioned_sample_matrix(qgis_processing, zinc, meuse):  # noqa: F811
    # Gaussian without nugget at 600 m: usable but past the warning level (tests/predict/test_factorisation_policy.py).
    document, path = gaussian_model_file(zinc, 600.0, "gaussian600.json")
    feedback = QgsProcessingFeedback()
    predict(qgis_processing, (zinc[0], path, zinc[2]), "gaussian600", feedback, NEIGHBOURS=0)
    expected = KrigingPredictor(meuse.xy, np.log(meuse.zinc), document.covariance, document.mean).warnings
    assert len(expected) == 1 and expected[0] in feedback.textLog()


@pytest.mark.parametrize("extra, message", [
    ({"NEIGHBOURS": 1}, "Set NEIGHBOURS to 2 or more"),
    ({"NEIGHBOURS": 8, "SUPPORT": "cell"}, "Set NEIGHBOURS to 0, or SUPPORT to point"),
])
def test_bad_neighbourhoods_are_refused_without_output(qgis_processing, zinc, extra, message):  # noqa: F811
    with pytest.raises(QgsProcessingException, match=message):
        predict(qgis_processing, zinc, "refused", **extra)
    assert not list(zinc[2].glob("refused*"))


def crossvalidate(processing, zinc, feedback=None, **extra) -> tuple[dict, list]:
    """Run fieldcast:crossvalidate into a memory layer; (outputs, features sorted by cv_feature_id)."""
    layer, model, _ = zinc
    outputs = processing.run("fieldcast:crossvalidate", {"INPUT": layer, "FIELD": "zinc", "MODEL": model,
                                                          "OUTPUT": "memory:", "OUTPUT_REPORT": "", **extra},
                             feedback=feedback)
    return outputs, sorted(outputs["OUTPUT"].getFeatures(), key=lambda f: f["cv_feature_id"])


def test_crossvalidate_with_neighbours_is_the_engine_local_leave_one_out(qgis_processing, zinc, meuse):  # noqa: F811
    feedback = QgsProcessingFeedback()
    outputs, features = crossvalidate(qgis_processing, zinc, feedback, NEIGHBOURS=16)
    document = ModelDocument.load(zinc[1])
    engine = local_leave_one_out(meuse.xy, np.log(meuse.zinc), document.covariance, document.mean, neighbours=16)
    for name, value in engine.summary().items():
        if name != "n":
            assert outputs[name] == pytest.approx(value, rel=1e-9, abs=1e-12), name
    for field, column in (("cv_observed", engine.observed), ("cv_predicted", engine.predicted),
                          ("cv_std_error", np.sqrt(engine.variance)), ("cv_error", engine.residual),
                          ("cv_z_score", engine.standardized)):
        np.testing.assert_allclose([f[field] for f in features], column, rtol=1e-9, atol=1e-12)
    assert "Local leave-one-out: each sample from its 16 nearest other samples." in feedback.textLog()


def test_crossvalidate_with_a_short_radius_counts_the_samples_left_out(qgis_processing, zinc, meuse):  # noqa: F811
    feedback = QgsProcessingFeedback()
    report = zinc[2] / "radius_cv.html"
    outputs, features = crossvalidate(qgis_processing, zinc, feedback, NEIGHBOURS=8, SEARCH_RADIUS=150.0,
                                      OUTPUT_REPORT=str(report))
    document = ModelDocument.load(zinc[1])
    engine = local_leave_one_out(meuse.xy, np.log(meuse.zinc), document.covariance, document.mean, neighbours=8,
                                 search_radius=150.0)
    left_out = len(features) - engine.summary()["n"]
    assert 0 < left_out < len(features)
    empty = [f["cv_feature_id"] for f in features if f["cv_predicted"] == NULL]
    assert empty == list(meuse.ids[np.isnan(engine.predicted)])
    assert outputs["RMSE"] == pytest.approx(engine.summary()["RMSE"], rel=1e-9)
    assert f"{left_out:,} sample(s) have too few other samples within SEARCH_RADIUS" in feedback.textLog()
    assert report.is_file() and outputs["OUTPUT_REPORT"] == str(report)  # the report covers the resolved samples


def test_crossvalidate_refuses_one_neighbour_without_output(qgis_processing, zinc):  # noqa: F811
    output = zinc[2] / "refused_cv.gpkg"
    with pytest.raises(QgsProcessingException, match="Set NEIGHBOURS to 2 or more"):
        qgis_processing.run("fieldcast:crossvalidate", {"INPUT": zinc[0], "FIELD": "zinc", "MODEL": zinc[1],
                                                        "NEIGHBOURS": 1, "OUTPUT": str(output),
                                                        "OUTPUT_REPORT": str(zinc[2] / "refused_cv.html")})
    assert not list(zinc[2].glob("refused_cv*"))


def test_blocks_are_whole_tile_rows():
    for n_cols in (1, 100, 4096, 5000, 100_000):
        rows = surface.block_rows(GridSpec(0.0, 0.0, 1.0, n_cols, 10))
        assert rows % 256 == 0 and (rows == 256 or rows * n_cols <= surface.BLOCK_CELLS)


def test_surface_written_in_blocks_equals_one_piece(meuse, tmp_path, monkeypatch):
    model = CovarianceModel((Structure("exponential", 0.6, 400.0),), 0.05)  # invented model, only to fill cells
    predictor = LocalKrigingPredictor(meuse.xy, np.log(meuse.zinc), model, MeanModel.for_data("constant", meuse.xy),
                                      neighbours=16)
    grid = GridSpec(178440.0, 333760.0, 10.0, 7, 700)
    scale = surface.SurfaceScale(Transform("log"))
    files, steps = {}, {}
    for name, cells in (("blocks", 256 * 7), ("whole", 10**6)):
        monkeypatch.setattr(surface, "BLOCK_CELLS", cells)
        steps[name] = surface.block_rows(grid)
        paths = {"prediction": str(tmp_path / f"{name}.tif"), "variance": str(tmp_path / f"{name}_var.tif")}
        surface.write_surfaces(surface.cell_predictor(predictor, "point", 10.0), grid, None, scale, "EPSG:28992",
                               [surface.FieldRasters("zinc", paths, {})])
        files[name] = [read_band(path) for path in paths.values()]
    assert steps == {"blocks": 256, "whole": 142848}  # three blocks (rows 0, 256, 512), or the whole raster
    for blocked, whole in zip(files["blocks"], files["whole"]):
        np.testing.assert_array_equal(blocked, whole)
