"""COVARIATES and CLASS_COVARIATES through processing.run on the published Meuse data.

Data: the Meuse topsoil samples and the published 40 m grid's distance to the river and flood-frequency class
(tests/data/README.md), written as GeoTIFFs by ``reference.write_meuse_covariates``; EPSG:28992 metres.
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from osgeo import gdal
from qgis.core import QgsProcessingException, QgsRasterLayer

from fieldcast.algorithms.io.covariates import CovariateSource, SampleCovariates
from fieldcast.algorithms.io.crs import to_wkt2
from fieldcast.algorithms.io.model_file import ModelDocument
from fieldcast.algorithms.predict.block import block_predict
from fieldcast.algorithms.predict.crossval import leave_one_out
from fieldcast.algorithms.predict.global_trend import estimate_trend
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.predict.local import LocalKrigingPredictor
from qgis_process_support import template_centres
from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures
from reference import write_meuse_covariates
from test_plugin_predictpoints import Log, band, columns, labelled_layer

FIT = {"FIELD": "zinc", "TRANSFORM": "log", "KERNEL": "spherical", "ANISOTROPY": False, "TREND": "constant",
       "METHOD": "reml"}


@pytest.fixture(scope="module")
def covariate_run(qgis_processing, meuse, tmp_path_factory):  # noqa: F811
    """Samples, the two covariate raster layers, and a model fitted with them (its path and log)."""
    folder = tmp_path_factory.mktemp("covariates")
    dist_path, ffreq_path = write_meuse_covariates(folder)
    dist, ffreq = QgsRasterLayer(str(dist_path), "dist"), QgsRasterLayer(str(ffreq_path), "ffreq")
    assert dist.isValid() and ffreq.isValid()
    samples = point_layer(meuse.xy, {"zinc": meuse.zinc})
    log = Log()
    model = qgis_processing.run("fieldcast:fitmodel", {
        "INPUT": samples, **FIT, "COVARIATES": [dist], "CLASS_COVARIATES": [ffreq],
        "OUTPUT_MODEL": str(folder / "zinc.json"), "OUTPUT_REPORT": str(folder / "fit.html")},
        feedback=log)["OUTPUT_MODEL"]
    return samples, dist, ffreq, model, log.lines, folder


def read_samples(meuse, dist, ffreq):
    """The Meuse samples where both rasters have a value, their log-zinc and covariate columns (engine)."""
    sources = [CovariateSource("dist", dist.source()), CovariateSource("ffreq", ffreq.source(), "class")]
    read = SampleCovariates.read(sources, meuse.xy, to_wkt2("EPSG:28992"))
    return meuse.xy[read.kept], np.log(meuse.zinc[read.kept]), read


def published_cells(centres, meuse_grid):
    """Which of ``centres`` are cells of the published grid, and the covariate columns (dist, ffreq=2, ffreq=3)
    the published grid gives them."""
    cell_of = {(round(x), round(y)): k for k, (x, y) in enumerate(meuse_grid.xy)}
    rows = np.array([cell_of.get((round(x), round(y)), -1) for x, y in centres])
    on_grid = rows >= 0
    kept = rows[on_grid]
    return on_grid, np.column_stack([meuse_grid.dist[kept], meuse_grid.ffreq[kept] == 2,
                                     meuse_grid.ffreq[kept] == 3]).astype(float)


def test_fit_records_covariates_coefficients_and_standard_errors(covariate_run, meuse):
    samples, dist, ffreq, model, lines, _ = covariate_run
    document = ModelDocument.load(model)
    with open(model, encoding="utf-8") as stream:
        data = json.load(stream)["mean"]
    assert data["covariates"] == ["dist", "ffreq=2", "ffreq=3"]
    assert [(c["name"], c["kind"], c.get("baseline")) for c in data["covariate_rasters"]] == [
        ("dist", "continuous", None), ("ffreq", "class", 1.0)]
    assert data["covariate_rasters"][0]["source"] == dist.source()
    xy, values, read = read_samples(meuse, dist, ffreq)
    skipped = int(np.count_nonzero(~read.kept))
    assert any(f"Skipped {skipped} of 155 samples where a covariate raster has no value" in line for line in lines)
    # The coefficients are the GLS estimates and their standard errors sqrt(diag((F'C^-1 F)^-1)) at the fitted
    # covariance (Cressie 1993, section 3.4): the coefficients by the engine's kriging system on the same samples,
    # the standard errors by a dense numpy solve.
    predictor = KrigingPredictor(xy, values, document.covariance, document.mean, read.columns)
    np.testing.assert_allclose(document.coefficients, predictor.coefficients, rtol=1e-6, atol=1e-9)
    design = document.mean.design(xy, read.columns)
    information = design.T @ np.linalg.solve(document.covariance.data_covariance(xy), design)
    np.testing.assert_allclose(document.standard_errors, np.sqrt(np.diag(np.linalg.inv(information))), rtol=1e-6)
    assert document.coefficients[1] < 0  # zinc falls away from the river (from memory, published analyses)
    line = next(line for line in lines if line.startswith("Mean coefficients"))
    assert f"dist = {document.coefficients[1]:.4g} ± {document.standard_errors[1]:.3g}" in line
    assert "ffreq=2" in line and "ffreq=3" in line
    report = (covariate_run[5] / "fit.html").read_text(encoding="utf-8")
    assert "<th>standard error</th>" in report
    assert "a term per class except the baseline class 1, the most frequent at the samples" in report


def test_crossvalidate_with_the_covariates_equals_the_engine_and_beats_no_covariates(qgis_processing, meuse,  # noqa: F811
                                                                                      covariate_run):
    samples, dist, ffreq, model, _, folder = covariate_run
    result = qgis_processing.run("fieldcast:crossvalidate", {
        "INPUT": samples, "FIELD": "zinc", "MODEL": model, "COVARIATES": [dist], "CLASS_COVARIATES": [ffreq],
        "OUTPUT": str(folder / "cv.gpkg"), "OUTPUT_REPORT": ""})
    document = ModelDocument.load(model)
    xy, values, read = read_samples(meuse, dist, ffreq)
    # Closed-form leave-one-out (Dubrule 1983) with the covariate columns, computed by the engine directly.
    expected = leave_one_out(xy, values, document.covariance, document.mean, read.columns).summary()
    assert result["RMSE"] == pytest.approx(expected["RMSE"], rel=1e-9)
    plain = qgis_processing.run("fieldcast:fitmodel", {"INPUT": samples, **FIT,
                                                       "OUTPUT_MODEL": str(folder / "plain.json")})["OUTPUT_MODEL"]
    without = qgis_processing.run("fieldcast:crossvalidate", {
        "INPUT": samples, "FIELD": "zinc", "MODEL": plain, "OUTPUT": str(folder / "cv_plain.gpkg"),
        "OUTPUT_REPORT": ""})
    # Distance to the river explains much of Meuse zinc (from memory, published analyses of these data).
    assert result["RMSE"] < without["RMSE"]


def test_predictpoints_with_covariates_equals_kriging_and_leaves_nodata_targets_empty(qgis_processing, meuse,  # noqa: F811
                                                                                      covariate_run, meuse_grid):
    samples, dist, ffreq, model, _, folder = covariate_run
    inside = meuse_grid.xy[::97]
    outside = np.array([[177000.0, 329000.0], [182500.0, 334500.0]])  # off the covariate rasters
    targets = labelled_layer(np.vstack([inside, outside]))
    log = Log()
    path = folder / "points.gpkg"
    qgis_processing.run("fieldcast:predictpoints", {
        "INPUT": samples, "FIELD": "zinc", "MODEL": model, "TARGETS": targets, "COVARIATES": [dist],
        "CLASS_COVARIATES": [ffreq], "BACKTRANSFORM": "median", "OUTPUT": str(path)}, feedback=log)
    found = columns(path, ["zinc_est", "zinc_sd", "well"])
    document = ModelDocument.load(model)
    xy, values, read = read_samples(meuse, dist, ffreq)
    # At the grid's cell centres the covariates are the published grid values exactly (bilinear at a centre).
    target_columns = np.column_stack([meuse_grid.dist[::97], meuse_grid.ffreq[::97] == 2,
                                      meuse_grid.ffreq[::97] == 3]).astype(float)
    mean, _ = KrigingPredictor(xy, values, document.covariance, document.mean, read.columns).predict(
        inside, target_columns)
    np.testing.assert_allclose(np.array(found["zinc_est"][:len(inside)], dtype=float), np.exp(mean), rtol=1e-5)
    assert found["zinc_est"][len(inside):] == [None, None]
    assert found["well"][-1] == f"W{len(inside) + 1}"
    assert any("2 target point(s) lie where a covariate raster has no value" in line for line in log.lines)


def test_later_steps_refuse_other_covariates_and_write_nothing(qgis_processing, covariate_run):  # noqa: F811
    samples, dist, ffreq, model, _, folder = covariate_run
    path = folder / "refused.gpkg"
    with pytest.raises(QgsProcessingException, match="missing 'ffreq'.*same raster layers"):
        qgis_processing.run("fieldcast:crossvalidate", {
            "INPUT": samples, "FIELD": "zinc", "MODEL": model, "COVARIATES": [dist], "OUTPUT": str(path),
            "OUTPUT_REPORT": ""})
    with pytest.raises(QgsProcessingException, match="missing 'dist', 'ffreq'"):
        qgis_processing.run("fieldcast:predictpoints", {
            "INPUT": samples, "FIELD": "zinc", "MODEL": model, "TARGETS": labelled_layer(np.zeros((1, 2)) + 180000),
            "OUTPUT": str(path)})
    with pytest.raises(QgsProcessingException, match="Covariates are kriged from all samples.*re-estimates the mean "
                                                     "in each neighbourhood. Untick LOCAL_MEAN, set NEIGHBOURS to 0"):
        qgis_processing.run("fieldcast:crossvalidate", {
            "INPUT": samples, "FIELD": "zinc", "MODEL": model, "COVARIATES": [dist], "CLASS_COVARIATES": [ffreq],
            "NEIGHBOURS": 16, "LOCAL_MEAN": True, "OUTPUT": str(path), "OUTPUT_REPORT": ""})
    assert not path.exists()


def test_a_covariate_repeated_in_both_lists_is_refused(qgis_processing, covariate_run):  # noqa: F811
    samples, dist, _, _, _, folder = covariate_run
    path = folder / "twice.json"
    with pytest.raises(QgsProcessingException, match="Several covariate layers are named 'dist'"):
        qgis_processing.run("fieldcast:fitmodel", {"INPUT": samples, **FIT, "COVARIATES": [dist],
                                                   "CLASS_COVARIATES": [dist], "OUTPUT_MODEL": str(path)})
    assert not path.exists()


def test_local_predict_with_covariates_and_every_sample_as_neighbourhood_equals_kriging(qgis_processing, meuse,  # noqa: F811
                                                                                         covariate_run, meuse_grid):
    # Local kriging of the residuals of the trend estimated once from all samples, with every sample as the
    # neighbourhood, is universal kriging with the covariates (Cressie 1993, section 3.4).
    samples, dist, ffreq, model, _, folder = covariate_run
    xy, values, read = read_samples(meuse, dist, ffreq)
    log = Log()
    path = folder / "zinc_local.tif"
    qgis_processing.run("fieldcast:predict", {
        "INPUT": samples, "FIELD": "zinc", "MODEL": model, "COVARIATES": [dist], "CLASS_COVARIATES": [ffreq],
        "TEMPLATE": dist, "TEMPLATE_NODATA_MASK": False, "MAP_AREA": "extent", "NEIGHBOURS": len(values),
        "OUTPUT": str(path), "OUTPUT_VARIANCE": "", "OUTPUT_SD": ""}, feedback=log)
    prediction, centres = band(path), template_centres(path)
    on_grid, cell_columns = published_cells(centres, meuse_grid)
    document = ModelDocument.load(model)
    mean, _ = KrigingPredictor(xy, values, document.covariance, document.mean, read.columns).predict(
        centres[on_grid], cell_columns)
    np.testing.assert_allclose(prediction[on_grid], np.exp(mean), rtol=1e-5)  # Float32 GeoTIFF
    assert any(f"Local kriging: each cell from its {len(values)} nearest samples, spread over 8 sectors around the "
               f"constant trend and covariates estimated once from all {len(values)} samples (generalised least "
               "squares, exactly)." in line
               for line in log.lines)


def test_predict_with_covariates_on_their_grid_equals_kriging_and_counts_nodata(qgis_processing, meuse,  # noqa: F811
                                                                                 covariate_run, meuse_grid):
    samples, dist, ffreq, model, _, folder = covariate_run
    log = Log()
    path = folder / "zinc_map.tif"
    qgis_processing.run("fieldcast:predict", {
        "INPUT": samples, "FIELD": "zinc", "MODEL": model, "COVARIATES": [dist], "CLASS_COVARIATES": [ffreq],
        "TEMPLATE": dist, "TEMPLATE_NODATA_MASK": False, "MAP_AREA": "extent", "OUTPUT": str(path),
        "OUTPUT_VARIANCE": "", "OUTPUT_SD": ""}, feedback=log)
    prediction = band(path)
    centres = template_centres(path)
    document = ModelDocument.load(model)
    xy, values, read = read_samples(meuse, dist, ffreq)
    # The map's cells are the published grid's cells; where the grid has no cell the covariates have no value.
    on_grid, cell_columns = published_cells(centres, meuse_grid)
    np.testing.assert_array_equal(np.isfinite(prediction), on_grid)
    assert any(f"{np.count_nonzero(~on_grid):,} cells of the map area are nodata because a covariate raster has no "
               "value there" in line for line in log.lines)
    mean, _ = KrigingPredictor(xy, values, document.covariance, document.mean, read.columns).predict(
        centres[on_grid], cell_columns)
    np.testing.assert_allclose(prediction[on_grid], np.exp(mean), rtol=1e-5)  # Float32 GeoTIFF
    # Cells whose distance to the river lies beyond the samples' range extrapolate the covariate trend: counted.
    low, high = read.columns[:, 0].min(), read.columns[:, 0].max()
    beyond = int(np.count_nonzero((cell_columns[:, 0] < low) | (cell_columns[:, 0] > high)))
    assert beyond > 0
    words = f"{beyond:,} of {np.count_nonzero(on_grid):,} mapped cells"
    assert any(line.startswith(words) and "covariate value outside the range seen at the samples" in line
               for line in log.lines)


def read_realisations(path: Path, count: int) -> np.ndarray:
    """The ``count`` bands of a realisations GeoTIFF, (count, cells) in raster order, NaN where nodata."""
    dataset = gdal.Open(str(path))
    realisations = np.stack([dataset.GetRasterBand(k + 1).ReadAsArray().astype(float).ravel()
                             for k in range(count)])
    realisations[realisations == dataset.GetRasterBand(1).GetNoDataValue()] = np.nan
    return realisations


def test_simulate_with_covariates_is_centred_on_kriging_with_them(qgis_processing, meuse, covariate_run,  # noqa: F811
                                                                 meuse_grid):
    samples, dist, ffreq, model, _, folder = covariate_run
    log = Log()
    path = folder / "realisations.tif"
    count = 100
    qgis_processing.run("fieldcast:simulate", {
        "INPUT": samples, "FIELD": "zinc", "MODEL": model, "COVARIATES": [dist], "CLASS_COVARIATES": [ffreq],
        "TEMPLATE": dist, "TEMPLATE_NODATA_MASK": False, "REALIZATIONS": count, "SEED": 7, "OUTPUT": str(path)},
        feedback=log)
    realisations = read_realisations(path, count)
    centres = template_centres(path)
    on_grid, cell_columns = published_cells(centres, meuse_grid)
    np.testing.assert_array_equal(np.isfinite(realisations).all(axis=0), on_grid)
    assert any(f"{np.count_nonzero(~on_grid):,} cells are nodata in every output because a covariate raster" in line
               for line in log.lines)
    document = ModelDocument.load(model)
    xy, values, read = read_samples(meuse, dist, ffreq)
    # The covariate trend extrapolates at the cells whose published distance to the river lies outside the range
    # read at the samples (both flood-frequency indicators take 0 and 1 at the samples, so never leave it).
    low, high = read.columns[:, 0].min(), read.columns[:, 0].max()
    beyond = np.count_nonzero((cell_columns[:, 0] < low) | (cell_columns[:, 0] > high))
    assert any(line.startswith(f"{beyond:,} of {np.count_nonzero(on_grid):,} mapped cells") and
               "covariate trend is extrapolated" in line for line in log.lines)
    mean, variance = KrigingPredictor(xy, values, document.covariance, document.mean, read.columns).predict(
        centres[on_grid], cell_columns)
    # Conditional simulation by kriging (Journel & Huijbregts 1978): at every cell the log of the realisations is
    # normal with the kriging mean and variance, so the standardised mean of 100 realisations is about N(0, 1).
    z = (np.log(realisations[:, on_grid]).mean(axis=0) - mean) / np.sqrt(variance / count)
    assert abs(np.mean(z)) < 1.0 and np.mean(z ** 2) < 3.0


def test_local_simulate_with_covariates_is_centred_on_local_kriging_around_the_global_trend(
        qgis_processing, meuse, covariate_run, meuse_grid):  # noqa: F811
    # NEIGHBOURS=16 with covariates: the covariate trend is estimated once from all samples (GLS) and each
    # realisation conditions its residuals on its 16 neighbours, so (Journel & Huijbregts 1978, conditioning by
    # kriging) the log of the realisations is centred on local kriging around that trend; LOCAL_MEAN on refuses.
    samples, dist, ffreq, model, _, folder = covariate_run
    log = Log()
    path = folder / "local_realisations.tif"
    count = 60
    parameters = {"INPUT": samples, "FIELD": "zinc", "MODEL": model, "COVARIATES": [dist],
                  "CLASS_COVARIATES": [ffreq], "TEMPLATE": dist, "TEMPLATE_NODATA_MASK": False,
                  "REALIZATIONS": count, "SEED": 4, "NEIGHBOURS": 16, "OUTPUT": str(path)}
    qgis_processing.run("fieldcast:simulate", parameters, feedback=log)
    realisations = read_realisations(path, count)
    on_grid, cell_columns = published_cells(template_centres(path), meuse_grid)
    np.testing.assert_array_equal(np.isfinite(realisations).all(axis=0), on_grid)
    xy, values, read = read_samples(meuse, dist, ffreq)
    assert any(f"Local conditioning, spread over 8 sectors around the constant trend and covariates estimated once "
               f"from all {len(values)} samples" in line and "coefficients drawn" in line for line in log.lines)
    document = ModelDocument.load(model)
    trend = estimate_trend(xy, values, document.covariance, document.mean, read.columns)
    local = LocalKrigingPredictor(xy, values, document.covariance, document.mean, neighbours=16,
                                  covariates=read.columns, trend=trend, sectors=8)
    mean, variance = local.predict(template_centres(path)[on_grid], cell_columns)
    # The standardised mean of 60 realisations per cell is about N(0, 1) (normal theory).
    z = (np.log(realisations[:, on_grid]).mean(axis=0) - mean) / np.sqrt(variance / count)
    assert abs(np.mean(z)) < 1.0 and np.mean(z ** 2) < 3.0
    refused = folder / "local_mean_realisations.tif"
    with pytest.raises(QgsProcessingException, match="Covariates are kriged from all samples.*re-estimates the mean "
                                                     "in each neighbourhood. Untick LOCAL_MEAN, set NEIGHBOURS to 0"):
        qgis_processing.run("fieldcast:simulate", {**parameters, "LOCAL_MEAN": True, "OUTPUT": str(refused)})
    assert not refused.exists()


@pytest.mark.parametrize("shared", [False, True])
def test_predictmany_fits_and_maps_each_field_with_the_covariates(qgis_processing, meuse, covariate_run,  # noqa: F811
                                                                  meuse_grid, shared):
    _, dist, ffreq, _, _, folder = covariate_run
    samples = point_layer(meuse.xy, {"zinc": meuse.zinc, "copper": meuse.copper})
    out = folder / f"many_{shared}"
    qgis_processing.run("fieldcast:predictmany", {
        "INPUT": samples, "FIELDS": ["zinc", "copper"], "COVARIATES": [dist], "CLASS_COVARIATES": [ffreq],
        **{key: value for key, value in FIT.items() if key != "FIELD"}, "SHARED_MODEL": shared, "TEMPLATE": dist,
        "TEMPLATE_NODATA_MASK": False, "MAP_AREA": "extent", "OUTPUT_FOLDER": str(out)})
    for field in ("zinc", "copper"):
        document = ModelDocument.load(str(out / f"{field}_model.json"))
        assert document.covariates.column_names == ("dist", "ffreq=2", "ffreq=3")
        assert len(document.standard_errors) == 4
        path = out / f"{field}_prediction.tif"
        prediction, centres = band(path), template_centres(path)
        on_grid, cell_columns = published_cells(centres, meuse_grid)
        np.testing.assert_array_equal(np.isfinite(prediction), on_grid)
        sources = [CovariateSource("dist", dist.source()), CovariateSource("ffreq", ffreq.source(), "class")]
        read = SampleCovariates.read(sources, meuse.xy, to_wkt2("EPSG:28992"))
        values = np.log(getattr(meuse, field)[read.kept])
        mean, _ = KrigingPredictor(meuse.xy[read.kept], values, document.covariance, document.mean,
                                   read.columns).predict(centres[on_grid], cell_columns)
        np.testing.assert_allclose(prediction[on_grid], np.exp(mean), rtol=1e-5)  # Float32 GeoTIFF


def test_collinear_or_constant_covariates_are_refused_by_fitmodel_writing_nothing(qgis_processing, meuse,  # noqa: F811
                                                                                  covariate_run, tmp_path):
    samples, dist, _, _, _, _ = covariate_run
    scaled = tmp_path / "dist_km.tif"
    gdal.Translate(str(scaled), dist.source(), scaleParams=[[0, 1, 0, 1000]], outputType=gdal.GDT_Float32)
    flat = tmp_path / "flat.tif"
    gdal.Translate(str(flat), dist.source(), scaleParams=[[0, 1, 5, 5]], outputType=gdal.GDT_Float32)
    path = tmp_path / "model.json"
    with pytest.raises(QgsProcessingException, match="'dist_km' is a combination of the columns before it"):
        qgis_processing.run("fieldcast:fitmodel", {"INPUT": samples, **FIT, "OUTPUT_MODEL": str(path),
                                                   "COVARIATES": [dist, QgsRasterLayer(str(scaled), "dist_km")]})
    with pytest.raises(QgsProcessingException, match="'flat' has the same value .* at every sample"):
        qgis_processing.run("fieldcast:fitmodel", {"INPUT": samples, **FIT, "OUTPUT_MODEL": str(path),
                                                   "COVARIATES": [QgsRasterLayer(str(flat), "flat")]})
    assert not path.exists()


def test_without_a_model_file_the_default_fit_takes_the_covariates(qgis_processing, meuse, covariate_run):  # noqa: F811
    samples, dist, ffreq, _, _, folder = covariate_run
    log = Log()
    result = qgis_processing.run("fieldcast:crossvalidate", {
        "INPUT": samples, "FIELD": "zinc", "COVARIATES": [dist], "CLASS_COVARIATES": [ffreq],
        "OUTPUT": str(folder / "cv_default.gpkg"), "OUTPUT_REPORT": ""}, feedback=log)
    model_line = next(line for line in log.lines if line.startswith("Model:"))
    assert "with covariates dist (continuous), ffreq (class, baseline class 1)" in model_line
    _, _, read = read_samples(meuse, dist, ffreq)
    assert result["RMSE"] > 0
    assert any(f"Using {len(meuse.zinc)} samples" in line for line in log.lines)
    assert any(f"Skipped {np.count_nonzero(~read.kept)} of 155 samples" in line
               and f"{np.count_nonzero(read.kept)} samples remain" in line for line in log.lines)


def test_an_output_on_a_covariate_raster_is_refused(qgis_processing, covariate_run):  # noqa: F811
    samples, dist, ffreq, model, _, _ = covariate_run
    before = Path(ffreq.source()).read_bytes()
    with pytest.raises(QgsProcessingException, match="OUTPUT would overwrite the input file .*ffreq.tif "
                                                     "\\(CLASS_COVARIATES\\)"):
        qgis_processing.run("fieldcast:predict", {
            "INPUT": samples, "FIELD": "zinc", "MODEL": model, "COVARIATES": [dist], "CLASS_COVARIATES": [ffreq],
            "TEMPLATE": dist, "OUTPUT": ffreq.source()})
    assert Path(ffreq.source()).read_bytes() == before


def test_cell_support_with_covariates_is_block_kriging_with_the_cell_values(qgis_processing, meuse,  # noqa: F811
                                                                            covariate_run, meuse_grid):
    samples, dist, ffreq, model, _, folder = covariate_run
    path = folder / "zinc_blocks.tif"
    qgis_processing.run("fieldcast:predict", {
        "INPUT": samples, "FIELD": "zinc", "MODEL": model, "COVARIATES": [dist], "CLASS_COVARIATES": [ffreq],
        "TEMPLATE": dist, "TEMPLATE_NODATA_MASK": False, "MAP_AREA": "extent", "SUPPORT": "cell_log",
        "OUTPUT": str(path), "OUTPUT_VARIANCE": "", "OUTPUT_SD": ""})
    prediction, centres = band(path), template_centres(path)
    on_grid, cell_columns = published_cells(centres, meuse_grid)
    document = ModelDocument.load(model)
    xy, values, read = read_samples(meuse, dist, ffreq)
    predictor = KrigingPredictor(xy, values, document.covariance, document.mean, read.columns)
    # Block kriging (Journel & Huijbregts 1978) of the log-scale cell average (cell_log), the covariates' cell
    # values standing for their average over the cell (the output cells are the covariate raster's own cells here).
    mean, _ = block_predict(predictor, centres[on_grid][::50], 40.0, cell_columns[::50])
    np.testing.assert_array_equal(np.isfinite(prediction), on_grid)
    np.testing.assert_allclose(prediction[on_grid][::50], np.exp(mean), rtol=1e-5)


def test_a_covariate_or_template_that_is_no_raster_file_is_refused_naming_its_parameter(qgis_processing,  # noqa: F811
                                                                                        covariate_run):
    samples, _, _, _, _, folder = covariate_run
    # An XYZ tile layer (served by the wms provider): valid without a network, but no file GDAL could read.
    tiles = QgsRasterLayer("type=xyz&url=http://127.0.0.1:9/%7Bz%7D/%7Bx%7D/%7By%7D.png&zmax=19&zmin=0", "tiles",
                           "wms")
    assert tiles.providerType() == "wms"
    model, surface = folder / "tiles.json", folder / "tiles.tif"
    with pytest.raises(QgsProcessingException, match=r"'tiles' \(COVARIATES\) is not a raster file.*Save it as a "
                                                     r"GeoTIFF.*in COVARIATES"):
        qgis_processing.run("fieldcast:fitmodel", {"INPUT": samples, **FIT, "COVARIATES": [tiles],
                                                   "OUTPUT_MODEL": str(model)})
    with pytest.raises(QgsProcessingException, match=r"template raster 'tiles' \(TEMPLATE\) is not a raster file.*"
                                                     r"in TEMPLATE"):
        qgis_processing.run("fieldcast:predict", {"INPUT": samples, "FIELD": "zinc", "TEMPLATE": tiles,
                                                  "OUTPUT": str(surface)})
    assert not model.exists() and not surface.exists()
