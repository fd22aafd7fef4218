"""Covariate rasters built from the published Meuse 40 m grid: reading at samples, resampling, design, GLS fit."""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import gdal
from scipy.spatial import cKDTree

from fieldcast.algorithms import (
    CovariateSet,
    CovariateSource,
    FieldcastError,
    FieldcastUsageError,
    FieldRasters,
    FitOptions,
    KrigingPredictor,
    MeanModel,
    SampleCovariates,
    SurfaceScale,
    Transform,
    cell_predictor,
    check_design,
    fit_with,
    leave_one_out,
    trend_standard_errors,
    write_surfaces,
)
from fieldcast.algorithms.io.covariates import resample_rows, sample_at_points
from fieldcast.algorithms.io.crs import to_wkt2
from fieldcast.algorithms.io.grid import GridSpec
from reference import GRID_CELL, MEUSE_LOG_ZINC, load_meuse_grid, write_meuse_covariates

WORKING = to_wkt2("EPSG:28992")


@pytest.fixture(scope="module")
def rasters(tmp_path_factory):
    """(dist.tif, ffreq.tif) of the published Meuse grid."""
    return write_meuse_covariates(tmp_path_factory.mktemp("covariates"))


@pytest.fixture(scope="module")
def sources(rasters):
    dist, ffreq = rasters
    return [CovariateSource("dist", str(dist)), CovariateSource("ffreq", str(ffreq), "class")]


@pytest.fixture(scope="module")
def sampled(meuse, sources):
    """The covariates at the Meuse samples, the samples kept and their log-zinc."""
    read = SampleCovariates.read(sources, meuse.xy, WORKING)
    return read, meuse.xy[read.kept], np.log(meuse.zinc[read.kept])


def raster_cells(path):
    dataset = gdal.Open(str(path))
    band = dataset.GetRasterBand(1)
    cells = band.ReadAsArray().astype(float)
    cells[cells == band.GetNoDataValue()] = np.nan
    return cells, GridSpec.from_geotransform(dataset.GetGeoTransform(), dataset.RasterXSize, dataset.RasterYSize,
                                             "covariate")


def test_values_at_the_samples_agree_with_the_published_sample_values(meuse, sources, sampled):
    read, _, _ = sampled
    raw = sample_at_points(sources, meuse.xy, WORKING)
    kept = read.kept
    # The published Meuse data give dist both at the samples (meuse.csv) and on the 40 m grid (meuse_grid.csv);
    # bilinear reading of the grid stays within a 40 m cell's change of the normalised distance (0.03 here).
    assert np.max(np.abs(raw[kept, 0] - meuse.dist[kept])) < 0.03
    # The class read is that of the published grid cell nearest to the sample (scipy's k-d tree), for every
    # sample not on a cell edge (there both cells are equally near).
    grid = load_meuse_grid()
    distance, nearest = cKDTree(grid.xy).query(meuse.xy)
    on_edge = np.any(np.isclose(np.abs(meuse.xy - grid.xy[nearest]), GRID_CELL / 2), axis=1)
    inside = distance < GRID_CELL / np.sqrt(2)
    assert np.count_nonzero(inside & ~on_edge) > 140
    np.testing.assert_array_equal(raw[inside & ~on_edge, 1], grid.ffreq[nearest[inside & ~on_edge]])
    # Samples off the published grid (or next to its edge for the bilinear reading) have no covariate value.
    assert 0 < read.skipped < 10
    assert np.all(np.isnan(raw[~kept]).any(axis=1))


def test_class_covariate_has_indicators_except_the_most_frequent_class(sampled):
    read, _, _ = sampled
    ffreq = read.covariates.covariates[1]
    raw = read.columns
    classes, counts = np.unique(sampled[0].columns[:, 1] + 2 * sampled[0].columns[:, 2], return_counts=True)
    assert ffreq.classes == (1.0, 2.0, 3.0)
    assert ffreq.baseline == 1.0  # class 1 is the most frequent flood-frequency class at the samples
    assert counts[0] == counts.max()
    assert read.covariates.column_names == ("dist", "ffreq=2", "ffreq=3")
    assert set(np.unique(raw[:, 1:])) == {0.0, 1.0}
    assert np.all(raw[:, 1:].sum(axis=1) <= 1)


def test_resampling_onto_the_raster_grid_gives_its_cells_and_nodata(rasters, sources, sampled):
    dist_cells, grid = raster_cells(rasters[0])
    ffreq_cells, _ = raster_cells(rasters[1])
    covariates = sampled[0].covariates
    block = covariates.at_rows(sources, grid, 10, 30, WORKING)
    raw = resample_rows(sources, grid, 10, 30, WORKING)
    np.testing.assert_allclose(raw[:, 0], dist_cells[10:30].reshape(-1), rtol=1e-6)
    np.testing.assert_array_equal(raw[:, 1], ffreq_cells[10:30].reshape(-1))
    nodata = np.isnan(dist_cells[10:30].reshape(-1))
    assert nodata.any()
    np.testing.assert_array_equal(np.isnan(block).any(axis=1), nodata)


def test_resampling_onto_coarser_cells_averages(rasters, sources):
    dist_cells, grid = raster_cells(rasters[0])
    coarse = GridSpec(grid.x_min, grid.y_max, 2 * GRID_CELL, grid.n_cols // 2, grid.n_rows // 2)
    raw = resample_rows(sources[:1], coarse, 0, coarse.n_rows, WORKING)[:, 0].reshape(coarse.n_rows, coarse.n_cols)
    blocks = dist_cells[:2 * coarse.n_rows, :2 * coarse.n_cols].reshape(coarse.n_rows, 2, coarse.n_cols, 2)
    full = np.isfinite(blocks).all(axis=(1, 3))
    # Where the raster is finer than the output cell, each output cell is the mean of the four 40 m cells it holds.
    np.testing.assert_allclose(raw[full], blocks.mean(axis=(1, 3))[full], rtol=1e-6)


def test_gls_coefficients_and_reml_equal_an_independent_computation(meuse, sources, sampled):
    read, xy, values = sampled
    mean = MeanModel.for_data("constant", xy, read.covariates.column_names)
    result = fit_with(xy, values, FitOptions(kernel="spherical", anisotropy=False, mean=mean),
                      covariates=read.columns)
    structure = result.covariance.structures[0]
    raw = sample_at_points(sources, meuse.xy, WORKING)[read.kept]
    design = np.column_stack([np.ones(len(xy)), raw[:, 0], raw[:, 1] == 2, raw[:, 1] == 3]).astype(float)
    distance = np.hypot(*(xy[:, None, :] - xy[None, :, :]).transpose(2, 0, 1))
    scaled = np.minimum(distance / structure.range, 1.0)
    # Spherical covariance with nugget on the diagonal (Cressie 1993, eq. 2.3.8).
    covariance = structure.partial_sill * (1 - 1.5 * scaled + 0.5 * scaled ** 3)
    covariance += result.covariance.nugget * np.eye(len(xy))
    inverse = np.linalg.inv(covariance)
    information = design.T @ inverse @ design
    # GLS estimate beta = (F' C^-1 F)^-1 F' C^-1 z and its covariance (F' C^-1 F)^-1 (Cressie 1993, section 3.4).
    beta = np.linalg.solve(information, design.T @ inverse @ values)
    np.testing.assert_allclose(result.coefficients, beta, rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(trend_standard_errors(xy, result.covariance, result.mean, read.columns),
                               np.sqrt(np.diag(np.linalg.inv(information))), rtol=1e-6)
    # REML log-likelihood of the error contrasts (Harville 1974, Biometrika 61; without the constant
    # log|F'F| term, the project's convention): -2 l = (n-p) log 2 pi + log|C| + log|F'C^-1 F| + r'C^-1 r.
    residual = values - design @ beta
    n, p = design.shape
    minus_two = ((n - p) * np.log(2 * np.pi) + np.linalg.slogdet(covariance)[1]
                 + np.linalg.slogdet(information)[1] + residual @ inverse @ residual)
    assert result.log_likelihood == pytest.approx(-0.5 * minus_two, rel=1e-8)
    # Kriging with the covariates equals the bordered (universal-kriging) system solved directly
    # (Cressie 1993, eq. 3.4.7) at three samples' locations from all the others.
    target = np.array([0, 40, 90])
    others = np.setdiff1d(np.arange(n), target)
    bordered = np.block([[covariance[np.ix_(others, others)], design[others]],
                         [design[others].T, np.zeros((p, p))]])
    right = np.vstack([covariance[np.ix_(others, target)], design[target].T])
    weights = np.linalg.solve(bordered, right)[:len(others)]
    fitted = KrigingPredictor(xy[others], values[others], result.covariance, result.mean, read.columns[others])
    predicted, _ = fitted.predict(xy[target], read.columns[target])
    np.testing.assert_allclose(predicted, weights.T @ values[others], rtol=1e-8)


def test_leave_one_out_with_distance_beats_the_constant_mean(sources, sampled):
    read, xy, values = sampled
    dist = read.columns[:, :1]
    with_dist = MeanModel.for_data("constant", xy, ("dist",))
    options = {"kernel": "spherical", "anisotropy": False}
    fitted_with = fit_with(xy, values, FitOptions(mean=with_dist, **options), covariates=dist)
    fitted_without = fit_with(xy, values, FitOptions(**options))
    rmse_with = leave_one_out(xy, values, fitted_with.covariance, fitted_with.mean, dist).summary()["RMSE"]
    rmse_without = leave_one_out(xy, values, fitted_without.covariance, fitted_without.mean).summary()["RMSE"]
    # Distance to the river is the main explanatory variable of Meuse zinc in the published analyses of
    # these data (from memory): zinc falls away from the river, and with distance as covariate the leave-one-out
    # error of log-zinc is smaller.
    assert fitted_with.coefficients[1] < 0
    assert rmse_with < rmse_without


def test_closed_form_leave_one_out_with_covariates_equals_refits(sampled):
    read, xy, values = sampled
    result = fit_with(xy, values, FitOptions(kernel="exponential", anisotropy=False,
                                             mean=MeanModel.for_data("linear", xy, read.covariates.column_names)),
                      covariates=read.columns)
    loo = leave_one_out(xy, values, result.covariance, result.mean, read.columns)
    # Dubrule 1983: the closed form equals kriging each sample from all the others, covariance held fixed.
    for i in range(0, len(values), 7):
        out = np.arange(len(values)) != i
        predictor = KrigingPredictor(xy[out], values[out], result.covariance, result.mean, read.columns[out])
        predicted, variance = predictor.predict(xy[i:i + 1], read.columns[i:i + 1], include_nugget=True)
        assert loo.predicted[i] == pytest.approx(predicted[0], abs=1e-9)
        assert loo.variance[i] == pytest.approx(variance[0], rel=1e-9)


def test_a_covariate_constant_at_the_samples_is_refused(tmp_path, meuse):
    path = tmp_path / "flat.tif"
    dataset = gdal.GetDriverByName("GTiff").Create(str(path), 10, 10, 1, gdal.GDT_Float32)
    dataset.SetGeoTransform((178000.0, 500.0, 0.0, 334000.0, 0.0, -500.0))
    dataset.SetProjection(WORKING)
    dataset.GetRasterBand(1).Fill(3.0)
    dataset = None
    with pytest.raises(FieldcastError, match="'flat' has the same value \\(3\\) at every sample.*Remove it"):
        SampleCovariates.read([CovariateSource("flat", str(path))], meuse.xy, WORKING)


def test_collinear_covariates_are_refused_naming_the_column(sampled):
    read, xy, _ = sampled
    dist = read.columns[:, :1]
    names = ("1", "dist", "dist_km")
    with pytest.raises(FieldcastError, match="'dist_km' is a combination of the columns before it.*collinear"):
        check_design(np.column_stack([np.ones(len(xy)), dist, 3.0 * dist + 1.0]), names)
    check_design(np.column_stack([np.ones(len(xy)), read.columns]), ("1", *read.covariates.column_names))
    # The three flood-frequency indicators with the constant sum to it: collinear.
    all_classes = np.column_stack([read.columns[:, 1:], 1 - read.columns[:, 1:].sum(axis=1)])
    with pytest.raises(FieldcastError, match="'ffreq=1'"):
        check_design(np.column_stack([np.ones(len(xy)), all_classes]), ("1", "ffreq=2", "ffreq=3", "ffreq=1"))


def test_later_steps_require_the_same_covariates(sources, sampled):
    covariates = sampled[0].covariates
    covariates.require(sources)
    with pytest.raises(FieldcastError, match="missing 'ffreq'.*same raster layers"):
        covariates.require(sources[:1])
    with pytest.raises(FieldcastError, match="extra 'elev'"):
        covariates.require([*sources, CovariateSource("elev", sources[0].path)])
    with pytest.raises(FieldcastError, match="another kind or in another order"):
        covariates.require(sources[::-1])
    with pytest.raises(FieldcastError, match="fitted without covariates.*extra 'dist'.*Leave COVARIATES"):
        CovariateSet().require(sources[:1])
    CovariateSet().require([])
    with pytest.raises(FieldcastError, match="'ffreq' \\(CLASS_COVARIATES\\).*another kind"):
        covariates.require([sources[0], CovariateSource("ffreq", sources[1].path)])


def test_an_unseen_class_is_nodata(sampled):
    ffreq = sampled[0].covariates.covariates[1]
    design = ffreq.design(np.array([1.0, 2.0, 3.0, 4.0, np.nan]))
    np.testing.assert_array_equal(design[:3], [[0, 0], [1, 0], [0, 1]])
    assert np.isnan(design[3:]).all()


def test_covariate_set_round_trips_as_plain_data(sampled):
    covariates = sampled[0].covariates
    assert CovariateSet.from_list(covariates.to_list()) == covariates
    assert load_meuse_grid().ffreq.max() == 3


def test_a_raster_in_another_crs_is_read_with_the_points_transformed(tmp_path, meuse, rasters, sampled):
    # The distance raster warped to WGS 84 (EPSG:4326, degrees) by GDAL: read at the samples given in the Dutch
    # grid (EPSG:28992) it gives the values of the original within the change across a 40 m cell (the
    # normalised distance changes by at most about 0.03 per cell on the published grid), and so does the grid
    # resampled from it.
    warped = tmp_path / "dist_wgs84.tif"
    gdal.Warp(str(warped), str(rasters[0]), dstSRS="EPSG:4326", resampleAlg="bilinear")
    read, _, _ = sampled
    original = sample_at_points([CovariateSource("dist", str(rasters[0]))], meuse.xy, WORKING)[:, 0]
    moved = sample_at_points([CovariateSource("dist", str(warped))], meuse.xy, WORKING)[:, 0]
    both = np.isfinite(original) & np.isfinite(moved)
    assert np.count_nonzero(both) > 140
    assert np.max(np.abs(moved[both] - original[both])) < 0.03
    dist_cells, grid = raster_cells(rasters[0])
    block = resample_rows([CovariateSource("dist", str(warped))], grid, 20, 40, WORKING)[:, 0]
    expected = dist_cells[20:40].reshape(-1)
    both = np.isfinite(block) & np.isfinite(expected)
    assert np.count_nonzero(both) > 0.8 * np.count_nonzero(np.isfinite(expected))
    assert np.max(np.abs(block[both] - expected[both])) < 0.03


def test_a_map_where_no_cell_has_a_covariate_value_is_refused_writing_nothing(tmp_path, sources, sampled):
    read, xy, values = sampled
    mean = MeanModel.for_data("constant", xy, read.covariates.column_names)
    predictor = KrigingPredictor(xy, values, MEUSE_LOG_ZINC, mean, read.columns)
    grid = GridSpec(150000.0, 300000.0, 100.0, 20, 10)  # far off the covariate rasters
    path = tmp_path / "prediction.tif"
    fields = [FieldRasters("zinc", {"prediction": str(path)}, {}, 1.0)]

    def rows(start, stop):
        return read.covariates.at_rows(sources, grid, start, stop, WORKING)

    with pytest.raises(FieldcastError, match="No cell of the map area has a value in every covariate raster"):
        write_surfaces(cell_predictor(predictor), grid, None, SurfaceScale(Transform()), WORKING, fields,
                       covariates=rows)
    assert list(tmp_path.iterdir()) == []



def test_a_covariate_gdal_cannot_open_is_refused_naming_the_covariate_parameters(tmp_path, meuse):
    path = tmp_path / "not_a_raster.tif"
    path.write_text("no raster here")
    with pytest.raises(FieldcastError, match="GDAL cannot open covariate 'dist'") as caught:
        SampleCovariates.read([CovariateSource("dist", str(path))], meuse.xy, WORKING)
    assert "in COVARIATES or CLASS_COVARIATES" in str(caught.value) and "TEMPLATE" not in str(caught.value)


def test_a_class_covariate_of_measured_values_is_refused_naming_covariates(meuse, sources):
    # The published Meuse grid (tests/data/meuse_grid.csv) gives the distance to the river as fractions of 0..1,
    # not class codes.
    dist = sources[0]
    with pytest.raises(FieldcastError, match="Class covariate 'dist' holds .* not a whole-number class code") as caught:
        SampleCovariates.read([CovariateSource("dist", dist.path, "class")], meuse.xy, WORKING)
    assert "Give it in COVARIATES" in str(caught.value)


def test_an_unknown_covariate_kind_is_a_usage_error():
    """The plugin passes only the kinds of COVARIATE_KINDS; another is a caller's bug, reported as internal."""
    with pytest.raises(FieldcastUsageError, match="Unknown covariate kind 'categorical'"):
        CovariateSource("soil", "soil.tif", "categorical")


@pytest.mark.parametrize("projection", ["", 'LOCAL_CS["Undefined Cartesian SRS",UNIT["unknown",1]]'])
def test_a_covariate_raster_without_a_defined_crs_is_refused_with_advice(tmp_path, meuse, projection):
    path = tmp_path / "no_crs.tif"
    dataset = gdal.GetDriverByName("GTiff").Create(str(path), 10, 10, 1, gdal.GDT_Float32)
    dataset.SetGeoTransform((178000.0, 500.0, 0.0, 334000.0, 0.0, -500.0))
    if projection:
        dataset.SetProjection(projection)
    dataset = None
    with pytest.raises(FieldcastError, match="no_crs \\(a covariate raster\\) has no defined CRS.*Assign its real CRS"):
        SampleCovariates.read([CovariateSource("no_crs", str(path))], meuse.xy, WORKING)
