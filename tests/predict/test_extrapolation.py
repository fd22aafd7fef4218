"""The extrapolation checks of a kriged grid, on the published Meuse samples (EPSG:28992 metres, log zinc).

Counts are checked against brute force with scipy (every cell-to-sample distance) and the cut of predictions
outside the model against the standard normal tail.
"""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import gdal
from scipy.spatial.distance import cdist
from scipy.stats import norm

from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.extrapolation import TAIL_SDS, ExtrapolationCheck
from fieldcast.algorithms.predict.grid_surfaces import FieldRasters, SurfaceScale, cell_predictor, write_surfaces
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.predict.local import LocalKrigingPredictor
from reference import MEUSE_LOG_ZINC

GRID = GridSpec.from_extent(178440.0, 329600.0, 181560.0, 333760.0, 80.0)  # the samples' extent, 80 m cells
LOG = Transform("log")
# Gaussian correlation without nugget, range 1,000 m, sill 0.6 (about the log-zinc variance): the case where
# local kriging with 16 neighbours returns means far outside the data from well-conditioned systems
# (tests/predict/test_factorisation_policy.py).
GAUSSIAN = CovarianceModel((Structure("gaussian", 0.6, 1000.0),), 0.0)


@pytest.fixture(scope="module")
def log_zinc(meuse):
    return np.log(meuse.zinc)


def band(path) -> np.ndarray:
    """Band 1 of a GeoTIFF as a flat float array, nodata as NaN."""
    dataset = gdal.Open(str(path))
    values = dataset.GetRasterBand(1).ReadAsArray().astype(float).ravel()
    values[values == dataset.GetRasterBand(1).GetNoDataValue()] = np.nan
    return values


def krige(tmp_path, predictor, meuse, values, covariance, inside=None, kinds=("prediction", "variance")):
    """Write the grid through write_surfaces with a check; (check, {kind: band}, distance band)."""
    mean = MeanModel.for_data("constant", meuse.xy)
    check = ExtrapolationCheck.for_samples(meuse.xy, values, covariance, mean, LOG, ["zinc"])
    paths = {kind: str(tmp_path / f"{kind}.tif") for kind in kinds}
    write_surfaces(cell_predictor(predictor, "point", GRID.pixel_size), GRID, inside, SurfaceScale(LOG), "EPSG:28992",
                   [FieldRasters("zinc", paths, {})], check=check, distance_path=str(tmp_path / "distance.tif"))
    return check, {kind: band(path) for kind, path in paths.items()}, band(tmp_path / "distance.tif")


def test_six_standard_deviations_is_a_one_in_a_billion_tail():
    # Standard normal two-sided tail (Abramowitz & Stegun 1964, 26.2.17; scipy.stats.norm): below 2e-9 at 6 sd.
    assert 2 * norm.sf(TAIL_SDS) < 2e-9


def test_predictions_outside_the_model_are_nodata_and_counted(tmp_path, meuse, log_zinc):
    local = LocalKrigingPredictor(meuse.xy, log_zinc, GAUSSIAN, MeanModel.for_data("constant", meuse.xy),
                                  neighbours=16)
    check, bands, _ = krige(tmp_path, local, meuse, log_zinc, GAUSSIAN)
    engine_mean, _ = local.predict(GRID.cell_centres())
    # The constant mean by least squares is the sample mean; the model's standard deviation is sqrt(0.6).
    outside = np.abs(engine_mean - log_zinc.mean()) > TAIL_SDS * np.sqrt(0.6)
    assert outside.sum() > 100  # the case of the issue: means from far below to far above the data
    assert check.counts[0].outside_model == outside.sum()
    assert np.all(np.isnan(bands["prediction"][outside])) and np.all(np.isnan(bands["variance"][outside]))
    kept = ~outside & np.isfinite(bands["prediction"])
    np.testing.assert_allclose(bands["prediction"][kept], np.exp(engine_mean[kept]), rtol=1e-6)
    warnings = [line.text for line in check.lines() if line.level == "warning"]
    assert any(f"zinc: {outside.sum():,} cell(s) are nodata" in text and "KERNEL" in text for text in warnings)


def test_extrapolation_counts_match_brute_force(tmp_path, meuse, log_zinc):
    global_predictor = KrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, MeanModel.for_data("constant", meuse.xy))
    check, bands, distance = krige(tmp_path, global_predictor, meuse, log_zinc, MEUSE_LOG_ZINC)
    centres = GRID.cell_centres()
    nearest = cdist(centres, meuse.xy).min(axis=1)  # scipy brute force, every cell to every sample
    np.testing.assert_allclose(distance, nearest.astype(np.float32), rtol=1e-6)
    assert check.counts[0].outside_model == 0  # a spherical model with nugget: stable weights
    # The spherical correlation 1 - 1.5 r + 0.5 r^3 (Cressie 1993, Statistics for Spatial Data, chapter 2) falls
    # to 0.05 at its root in (0, 1).
    roots = np.roots([0.5, 0.0, -1.5, 0.95])
    reach = MEUSE_LOG_ZINC.structures[0].range * float(roots[(roots.real > 0) & (roots.real < 1)].real[0])
    assert check.beyond_range == np.count_nonzero(nearest > reach) > 0
    prediction = bands["prediction"]
    below = np.count_nonzero(prediction < meuse.zinc.min())
    above = np.count_nonzero(prediction > meuse.zinc.max())
    assert (check.counts[0].below, check.counts[0].above) == (below, above)
    assert f"{below + above:,} mapped cells" in " ".join(line.text for line in check.lines())


def test_anisotropic_reach_is_measured_in_the_structure_frame(meuse, log_zinc):
    # Minor range 200 m across azimuth 45: a cell 300 m from the samples across the major axis is out of reach.
    model = CovarianceModel((Structure("spherical", 0.59, 1000.0, azimuth=45.0, ratio=0.2),), 0.05)
    check = ExtrapolationCheck.for_samples(meuse.xy[:1], log_zinc[:1], model, MeanModel.for_data("known", meuse.xy),
                                           LOG, ["zinc"])
    step = 300.0 / np.sqrt(2.0)  # 300 m towards azimuth 135 (across) and towards azimuth 45 (along)
    centres = meuse.xy[:1] + np.array([[step, -step], [step, step]])
    check.screen(centres, np.full((2, 1), log_zinc[0]), np.zeros((2, 1)))
    assert check.beyond_range == 1


def test_distances_are_nodata_outside_the_mask(tmp_path, meuse, log_zinc):
    inside = np.zeros((GRID.n_rows, GRID.n_cols), bool)
    inside[: GRID.n_rows // 2] = True
    predictor = KrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, MeanModel.for_data("constant", meuse.xy))
    check, _, distance = krige(tmp_path, predictor, meuse, log_zinc, MEUSE_LOG_ZINC, inside=inside)
    assert np.all(np.isnan(distance[~inside.ravel()])) and np.all(np.isfinite(distance[inside.ravel()]))
    assert check.cells == inside.sum()


def test_several_fields_are_checked_each_at_its_own_scale(meuse):
    # Log zinc and log copper under one correlation model, copper's sill a quarter of zinc's: each column is
    # checked as it would be alone with its own sill.
    values = np.log(np.column_stack([meuse.zinc, meuse.copper]))
    mean = MeanModel.for_data("constant", meuse.xy)
    both = ExtrapolationCheck.for_samples(meuse.xy, values, GAUSSIAN, mean, LOG, ["zinc", "copper"], [1.0, 0.25])
    centres = GRID.cell_centres()
    predicted, _ = LocalKrigingPredictor(meuse.xy, values, GAUSSIAN, mean, neighbours=16).predict(centres)
    both.screen(centres, predicted, np.zeros_like(predicted))
    for column, (name, sill) in enumerate([("zinc", 0.6), ("copper", 0.15)]):
        alone = ExtrapolationCheck.for_samples(meuse.xy, values[:, column], CovarianceModel(
            (Structure("gaussian", sill, 1000.0),), 0.0), mean, LOG, [name])
        alone.screen(centres, predicted[:, column:column + 1], np.zeros((len(centres), 1)))
        assert both.counts[column].outside_model == alone.counts[0].outside_model > 0
        assert alone.counts[0].outside_model == np.count_nonzero(
            np.abs(predicted[:, column] - values[:, column].mean()) > TAIL_SDS * np.sqrt(sill))
