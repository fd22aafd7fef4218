"""The three toolbox algorithms on the published Meuse data, checked against the engine and the kriging system.

Data: the Meuse topsoil samples and 40 m grid (Rikken & Van Rijn 1993, as shipped in Debian's
r-cran-sp package; tests/data/README.md), EPSG:28992 metres. The algorithms run in-process through
``processing.run`` with the plugin loaded by folder path (tests/qgis_support.py).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest
from osgeo import gdal
from qgis.core import (
    QgsFeature,
    QgsGeometry,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsRasterLayer,
    QgsRectangle,
    QgsVectorLayer,
)
from scipy import stats

from fieldcast.algorithms.fit.fitting import fit_model
from fieldcast.algorithms.io.crs import same_crs
from fieldcast.algorithms.io.grid import GridSpec, default_pixel_size
from fieldcast.algorithms.io.mask import hull_mask
from fieldcast.algorithms.io.model_file import ModelDocument
from fieldcast.algorithms.predict.crossval import leave_one_out
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.version import __version__
from qgis_support import CancelAfterFirstProgress, fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures

FIT_SETTINGS = {"TRANSFORM": "log", "KERNEL": "spherical", "ANISOTROPY": True, "TREND": "constant",
                "METHOD": "reml"}
# Cell centres of the published grid run from x 178460 to 181540 and y 329620 to 333740 (meuse_grid.csv);
# the raster's cell edges lie half a cell (20 m) outside them.
MEUSE_GRID_EXTENT = (178440.0, 329600.0, 181560.0, 333760.0)
CELL = 40.0


@dataclass
class MeuseRun:
    """Outputs of fitmodel -> predict -> crossvalidate on log(zinc)."""

    model_path: str
    fit_outputs: dict
    prediction: gdal.Dataset
    variance: gdal.Dataset
    intervals: dict[str, gdal.Dataset]
    crossvalidation: QgsVectorLayer
    cv_outputs: dict


def mask_layer(grid_xy: np.ndarray) -> QgsVectorLayer:
    """The Meuse grid cells as 40 m square polygons (EPSG:28992)."""
    layer = QgsVectorLayer("Polygon?crs=EPSG:28992", "cells", "memory")
    features = []
    for x, y in grid_xy:
        feature = QgsFeature()
        feature.setGeometry(QgsGeometry.fromRect(QgsRectangle(x - CELL / 2, y - CELL / 2, x + CELL / 2, y + CELL / 2)))
        features.append(feature)
    layer.dataProvider().addFeatures(features)
    return layer


@pytest.fixture(scope="module")
def meuse_run(qgis_processing, meuse, meuse_grid, tmp_path_factory) -> MeuseRun:  # noqa: F811
    folder = tmp_path_factory.mktemp("plugin-meuse")
    samples = point_layer(meuse.xy, {"zinc": meuse.zinc})
    fit = qgis_processing.run("fieldcast:fitmodel", {"INPUT": samples, "FIELD": "zinc", **FIT_SETTINGS,
                                                     "OUTPUT_MODEL": str(folder / "zinc.json")})
    x_min, y_min, x_max, y_max = MEUSE_GRID_EXTENT
    qgis_processing.run("fieldcast:predict", {
        "INPUT": samples, "FIELD": "zinc", "MODEL": fit["OUTPUT_MODEL"],
        "EXTENT": f"{x_min},{x_max},{y_min},{y_max} [EPSG:28992]", "PIXEL_SIZE": CELL,
        "MASK": mask_layer(meuse_grid.xy), "MAP_AREA": "extent", "OUTPUT": str(folder / "zinc.tif"),
        "OUTPUT_VARIANCE": str(folder / "zinc_variance.tif"), "OUTPUT_SD": str(folder / "zinc_sd.tif"),
        "OUTPUT_LOWER": str(folder / "zinc_lower.tif"), "OUTPUT_UPPER": str(folder / "zinc_upper.tif")})
    labelled = point_layer(meuse.xy, {"sample": meuse.ids.astype(float), "zinc": meuse.zinc})
    cv = qgis_processing.run("fieldcast:crossvalidate", {"INPUT": labelled, "FIELD": "zinc",
                                                         "MODEL": fit["OUTPUT_MODEL"], "OUTPUT": "memory:"})
    return MeuseRun(fit["OUTPUT_MODEL"], fit, gdal.Open(str(folder / "zinc.tif")),
                    gdal.Open(str(folder / "zinc_variance.tif")),
                    {kind: gdal.Open(str(folder / f"zinc_{kind}.tif")) for kind in ("sd", "lower", "upper")},
                    cv["OUTPUT"], cv)


def band(dataset: gdal.Dataset) -> np.ndarray:
    """Band 1 as float64 with nodata cells as NaN."""
    raster = dataset.GetRasterBand(1)
    values = raster.ReadAsArray().astype(float)
    values[values == raster.GetNoDataValue()] = np.nan
    return values


def cell_centres(dataset: gdal.Dataset) -> np.ndarray:
    """Centres of every cell in raster order, (rows * cols, 2), from the file's geotransform."""
    x0, dx, _, y0, _, dy = dataset.GetGeoTransform()
    cols, rows = np.meshgrid(np.arange(dataset.RasterXSize), np.arange(dataset.RasterYSize))
    return np.column_stack([x0 + (cols.ravel() + 0.5) * dx, y0 + (rows.ravel() + 0.5) * dy])


def test_fitted_model_file_is_the_engine_fit(meuse_run, meuse):
    document = ModelDocument.load(meuse_run.model_path)
    engine = fit_model(meuse.xy, np.log(meuse.zinc), kernel="spherical", anisotropy=True, mean="constant",
                       method="reml")
    assert document.transform.kind == "log" and document.field == "zinc"
    assert same_crs(document.crs_wkt, "EPSG:28992") and document.units == "metre"
    first = engine.covariance.structures[0]
    expected = {"PARTIAL_SILL": first.partial_sill, "RANGE": first.range, "NUGGET": engine.covariance.nugget,
                "AZIMUTH": first.azimuth, "RATIO": first.ratio, "LOG_LIKELIHOOD": engine.log_likelihood,
                "AIC": engine.aic}
    for name, value in expected.items():
        assert meuse_run.fit_outputs[name] == pytest.approx(value, rel=1e-9, abs=1e-9), name
    assert document.covariance == engine.covariance and document.mean == engine.mean
    np.testing.assert_array_equal(document.coefficients, engine.coefficients)


def test_prediction_raster_is_epsg_28992_at_40_m_aligned_on_the_grid(meuse_run):
    for dataset in (meuse_run.prediction, meuse_run.variance):
        assert same_crs(dataset.GetProjection(), "EPSG:28992")
        assert dataset.GetGeoTransform() == (178440.0, CELL, 0.0, 333760.0, 0.0, -CELL)
        assert (dataset.RasterXSize, dataset.RasterYSize) == (78, 104)
        assert dataset.GetRasterBand(1).DataType == gdal.GDT_Float32
        assert dataset.GetMetadataItem("fieldcast_version") == __version__
        stored = ModelDocument.from_json(dataset.GetMetadataItem("fieldcast_model"))
        assert stored.covariance == ModelDocument.load(meuse_run.model_path).covariance
    assert "median" in meuse_run.prediction.GetRasterBand(1).GetDescription()


def test_rasters_open_in_qgis_with_their_crs(meuse_run):
    # The Meuse data are published in EPSG:28992 (Amersfoort / RD New; tests/data/README.md).
    for dataset in (meuse_run.prediction, meuse_run.variance):
        layer = QgsRasterLayer(dataset.GetDescription(), "surface", "gdal")
        assert layer.isValid()
        assert layer.crs().authid() == "EPSG:28992"
    assert "lognormal" in meuse_run.variance.GetRasterBand(1).GetDescription()


def test_values_exist_exactly_on_the_meuse_grid_cells(meuse_run, meuse_grid):
    # Dataset documentation (meuse.grid): 3103 cells of 40 m covering the study area; the mask is those cells.
    prediction, variance = band(meuse_run.prediction), band(meuse_run.variance)
    x0, _, _, y0, _, _ = meuse_run.prediction.GetGeoTransform()
    cols = ((meuse_grid.xy[:, 0] - x0) // CELL).astype(int)
    rows = ((y0 - meuse_grid.xy[:, 1]) // CELL).astype(int)
    expected = np.zeros(prediction.shape, bool)
    expected[rows, cols] = True
    assert np.array_equal(np.isfinite(prediction), expected)
    assert np.array_equal(np.isfinite(variance), expected)
    assert np.nanmin(variance) >= 0.0


def test_cell_values_are_the_engine_kriging_predictions(meuse_run, meuse):
    document = ModelDocument.load(meuse_run.model_path)
    prediction, variance = band(meuse_run.prediction).ravel(), band(meuse_run.variance).ravel()
    inside = np.isfinite(prediction)
    centres = cell_centres(meuse_run.prediction)[inside]
    mu, s2 = KrigingPredictor(meuse.xy, np.log(meuse.zinc), document.covariance, document.mean).predict(centres)
    np.testing.assert_allclose(prediction[inside], np.exp(mu), rtol=2e-6)
    np.testing.assert_allclose(variance[inside], np.exp(2 * mu + s2) * np.expm1(s2), rtol=2e-6)


def test_standard_error_and_quantiles_are_those_of_the_lognormal_predictive_distribution(meuse_run, meuse):
    document = ModelDocument.load(meuse_run.model_path)
    prediction = band(meuse_run.prediction).ravel()
    inside = np.isfinite(prediction)
    mu, s2 = KrigingPredictor(meuse.xy, np.log(meuse.zinc), document.covariance, document.mean).predict(
        cell_centres(meuse_run.prediction)[inside])
    # Reference library: scipy.stats.lognorm(s=sqrt(s2), scale=exp(mu)), the distribution of exp(Y) for
    # Y ~ N(mu, s2); the default interval probability 0.9 gives its 5 % and 95 % quantiles.
    distribution = stats.lognorm(s=np.sqrt(s2), scale=np.exp(mu))
    intervals = {kind: band(dataset).ravel() for kind, dataset in meuse_run.intervals.items()}
    np.testing.assert_allclose(intervals["sd"][inside], distribution.std(), rtol=2e-6)
    np.testing.assert_allclose(intervals["lower"][inside], distribution.ppf(0.05), rtol=2e-6)
    np.testing.assert_allclose(intervals["upper"][inside], distribution.ppf(0.95), rtol=2e-6)
    for values in intervals.values():
        assert np.array_equal(np.isfinite(values), inside)
    assert meuse_run.intervals["upper"].GetMetadataItem("fieldcast_interval_probability") == "0.9"


def test_cells_solve_the_ordinary_kriging_system(meuse_run, meuse):
    # Ordinary kriging system [C 1; 1' 0][w; m] = [c0; 1], prediction w'y, error variance C(0) - w'c0 - m
    # (Cressie 1993, Statistics for Spatial Data, section 3.2), solved directly with numpy here;
    # lognormal median exp(mu) and variance exp(2 mu + s2)(exp(s2) - 1) (Aitchison & Brown 1957).
    document = ModelDocument.load(meuse_run.model_path)
    model = document.covariance
    n = len(meuse.xy)
    system = np.ones((n + 1, n + 1))
    system[:n, :n] = model.data_covariance(meuse.xy)
    system[n, n] = 0.0
    prediction, variance = band(meuse_run.prediction).ravel(), band(meuse_run.variance).ravel()
    centres = cell_centres(meuse_run.prediction)
    for cell in np.flatnonzero(np.isfinite(prediction))[::700]:
        c0 = model.cross_covariance(meuse.xy, centres[cell:cell + 1])[:, 0]
        solution = np.linalg.solve(system, np.append(c0, 1.0))
        mu = solution[:n] @ np.log(meuse.zinc)
        s2 = model.field_variance - solution[:n] @ c0 - solution[n]
        assert prediction[cell] == pytest.approx(np.exp(mu), rel=2e-6)
        assert variance[cell] == pytest.approx(np.exp(2 * mu + s2) * np.expm1(s2), rel=1e-5)


def test_variance_is_small_next_to_samples_and_larger_far_from_them(meuse_run, meuse):
    prediction, variance = band(meuse_run.prediction).ravel(), band(meuse_run.variance).ravel()
    inside = np.isfinite(prediction)
    centres = cell_centres(meuse_run.prediction)[inside]
    distance = np.min(np.hypot(*(centres[:, None, :] - meuse.xy[None, :, :]).transpose(2, 0, 1)), axis=1)
    # variance / median^2 = exp(s2)(exp(s2) - 1) grows with the log-scale variance s2 alone.
    relative = variance[inside] / prediction[inside] ** 2
    near, far = relative[distance < 20.0], relative[distance > 250.0]
    assert len(near) >= 20 and len(far) >= 20
    assert np.max(near) < np.min(far)


def test_crossvalidation_reproduces_the_engine_leave_one_out(meuse_run, meuse):
    document = ModelDocument.load(meuse_run.model_path)
    engine = leave_one_out(meuse.xy, np.log(meuse.zinc), document.covariance, document.mean)
    for name, value in engine.summary().items():
        if name != "n":
            assert meuse_run.cv_outputs[name] == pytest.approx(value, rel=1e-9, abs=1e-12), name
    features = sorted(meuse_run.crossvalidation.getFeatures(), key=lambda f: f["cv_feature_id"])
    assert [f["cv_feature_id"] for f in features] == list(meuse.ids)  # memory-layer feature ids are 1..155
    points = np.array([[f.geometry().asPoint().x(), f.geometry().asPoint().y()] for f in features])
    np.testing.assert_array_equal(points, meuse.xy)
    for field, column in (("cv_observed", engine.observed), ("cv_predicted", engine.predicted),
                          ("cv_std_error", np.sqrt(engine.variance)), ("cv_error", engine.residual),
                          ("cv_z_score", engine.standardized)):
        np.testing.assert_allclose([f[field] for f in features], column, rtol=1e-9, atol=1e-12)


def test_crossvalidation_keeps_the_input_fields_and_reads_in_ppm(meuse_run, meuse):
    document = ModelDocument.load(meuse_run.model_path)
    engine = leave_one_out(meuse.xy, np.log(meuse.zinc), document.covariance, document.mean)
    features = sorted(meuse_run.crossvalidation.getFeatures(), key=lambda f: f["cv_feature_id"])
    assert meuse_run.crossvalidation.fields().names() == [
        "sample", "zinc", "cv_feature_id", "cv_observed", "cv_predicted", "cv_std_error", "cv_error", "cv_z_score",
        "cv_observed_value", "cv_predicted_value", "cv_error_value"]
    assert [f["sample"] for f in features] == list(meuse.ids)
    # Published Meuse zinc in ppm (Rikken & Van Rijn 1993) against the lognormal median exp(mu) of each
    # leave-one-out prediction (Aitchison & Brown 1957); RMSE by its definition.
    np.testing.assert_allclose([f["cv_observed_value"] for f in features], meuse.zinc, rtol=1e-12)
    predicted = np.exp(engine.predicted)
    np.testing.assert_allclose([f["cv_predicted_value"] for f in features], predicted, rtol=1e-9)
    np.testing.assert_allclose([f["zinc"] - f["cv_predicted_value"] for f in features],
                               [f["cv_error_value"] for f in features], rtol=1e-9, atol=1e-9)
    assert meuse_run.cv_outputs["RMSE_ATTRIBUTE"] == pytest.approx(np.sqrt(np.mean((meuse.zinc - predicted) ** 2)),
                                                                   rel=1e-9)
    assert meuse_run.cv_outputs["ME_ATTRIBUTE"] == pytest.approx(np.mean(meuse.zinc - predicted), rel=1e-9)


def test_crossvalidation_fields_step_aside_for_input_fields_of_the_same_name(qgis_processing, meuse_run, meuse):  # noqa: F811
    samples = point_layer(meuse.xy, {"zinc": meuse.zinc, "CV_Error": meuse.copper, "cv_error_2": meuse.lead})
    outputs = qgis_processing.run("fieldcast:crossvalidate", {"INPUT": samples, "FIELD": "zinc",
                                                              "MODEL": meuse_run.model_path, "OUTPUT": "memory:"})
    layer = outputs["OUTPUT"]
    names = layer.fields().names()
    assert names[:3] == ["zinc", "CV_Error", "cv_error_2"] and "cv_error_3" in names and "cv_z_score" in names
    feature = next(layer.getFeatures())
    assert feature["cv_error_3"] == pytest.approx(feature["cv_observed"] - feature["cv_predicted"], rel=1e-12)
    assert feature["CV_Error"] == meuse.copper[feature["cv_feature_id"] - 1]


def test_crossvalidation_equals_kriging_without_the_sample(meuse_run, meuse):
    # Leave-one-out by definition: krige sample i from the other 154 with the ordinary kriging system
    # (Cressie 1993, section 3.2); the observation's error variance adds the nugget.
    document = ModelDocument.load(meuse_run.model_path)
    model = document.covariance
    values = np.log(meuse.zinc)
    features = {f["cv_feature_id"]: f for f in meuse_run.crossvalidation.getFeatures()}
    for left_out in (0, 77, 154):
        others = np.delete(np.arange(len(values)), left_out)
        n = len(others)
        system = np.ones((n + 1, n + 1))
        system[:n, :n] = model.data_covariance(meuse.xy[others])
        system[n, n] = 0.0
        c0 = model.cross_covariance(meuse.xy[others], meuse.xy[left_out:left_out + 1])[:, 0]
        solution = np.linalg.solve(system, np.append(c0, 1.0))
        feature = features[int(meuse.ids[left_out])]
        assert feature["cv_predicted"] == pytest.approx(solution[:n] @ values[others], rel=1e-9)
        assert feature["cv_std_error"] ** 2 == pytest.approx(model.sill - solution[:n] @ c0 - solution[n], rel=1e-7)


def test_predict_without_model_fits_the_defaults_and_sizes_cells_from_the_spacing(qgis_processing, meuse,  # noqa: F811
                                                                                  tmp_path):
    samples = point_layer(meuse.xy[:40], {"zinc": meuse.zinc[:40]})  # a subset keeps the default fit quick
    feedback = QgsProcessingFeedback()
    qgis_processing.run("fieldcast:predict", {"INPUT": samples, "FIELD": "zinc", "OUTPUT": str(tmp_path / "p.tif")},
                        feedback=feedback)
    assert "No model file given: fitting a model with the default settings" in feedback.textLog()
    dataset = gdal.Open(str(tmp_path / "p.tif"))
    low, high = meuse.xy[:40].min(axis=0), meuse.xy[:40].max(axis=0)
    pixel = default_pixel_size(meuse.xy[:40], (low[0], low[1], high[0], high[1]), max_cells=1_000_000)
    assert dataset.GetGeoTransform()[1] == pixel
    assert "attribute units; kriging prediction" in dataset.GetRasterBand(1).GetDescription()
    # Default MAP_AREA hull: values exactly at the cells within one median sample spacing of the convex hull.
    x0, _, _, y0, _, _ = dataset.GetGeoTransform()
    grid = GridSpec(x0, y0, pixel, dataset.RasterXSize, dataset.RasterYSize)
    near, margin = hull_mask(grid, meuse.xy[:40])
    assert np.array_equal(np.isfinite(band(dataset)), near) and not near.all()
    assert f"lie within {margin:.4g} metre of the samples' convex hull (MAP_AREA hull" in feedback.textLog()
    assert [path.name for path in tmp_path.iterdir()] == ["p.tif"]  # outputs not asked for are not written


def test_cancel_during_fit_leaves_no_model_file(qgis_processing, meuse, tmp_path):  # noqa: F811
    samples = point_layer(meuse.xy, {"zinc": meuse.zinc})
    feedback = CancelAfterFirstProgress(start_percent=0.0)
    with pytest.raises(QgsProcessingException, match="Cancelled"):
        qgis_processing.run("fieldcast:fitmodel", {"INPUT": samples, "FIELD": "zinc",
                                                   "OUTPUT_MODEL": str(tmp_path / "m.json")}, feedback=feedback)
    assert list(tmp_path.iterdir()) == []
