"""predict_points on Meuse log-zinc: the numbers at arbitrary points, against scipy.stats and the grid path.

Data: the Meuse topsoil samples (Rikken & Van Rijn 1993; tests/data/README.md), EPSG:28992 metres.
"""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import gdal
from scipy import stats

from fieldcast.algorithms.io.crs import to_wkt2
from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.extrapolation import ExtrapolationCheck
from fieldcast.algorithms.predict.grid_surfaces import (
    FieldRasters,
    SurfaceScale,
    cell_predictor,
    predict_points,
    write_surfaces,
)
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.predict.local import LocalKrigingPredictor
from reference import MEUSE_LOG_ZINC

GRID = GridSpec(x_min=178600.0, y_max=333600.0, pixel_size=200.0, n_cols=10, n_rows=13)
OFFSET = 1.0


@pytest.fixture(scope="module")
def log_zinc(meuse):
    """Samples (xy, ln(zinc + 1)) and the global predictor of the project's Meuse log-zinc model."""
    values = np.log(meuse.zinc + OFFSET)
    return meuse.xy, values, KrigingPredictor(meuse.xy, values, MEUSE_LOG_ZINC,
                                              MeanModel.for_data("constant", meuse.xy))


def targets(meuse) -> np.ndarray:
    """A few hundred points scattered over the samples' extent (fixed seed), not on any grid."""
    rng = np.random.default_rng(7)
    low, high = meuse.xy.min(axis=0), meuse.xy.max(axis=0)
    return low + rng.random((300, 2)) * (high - low)


def test_log_model_sd_and_exceedance_are_those_of_the_lognormal_predictive_distribution(meuse, log_zinc):
    _, _, predictor = log_zinc
    xy = targets(meuse)
    scale = SurfaceScale(Transform("log", OFFSET), "mean", threshold=300.0)
    found = predict_points(cell_predictor(predictor), xy, scale, ["prediction", "variance", "sd", "exceedance"])
    mu, s2 = predictor.predict(xy)
    # Reference library: scipy.stats.lognorm(s=sqrt(s2), scale=exp(mu)) is the law of exp(Y), Y ~ N(mu, s2);
    # the value is exp(Y) - offset, so its mean shifts by the offset and its sd and variance do not.
    distribution = stats.lognorm(s=np.sqrt(s2), scale=np.exp(mu))
    values = found.layers[0]
    np.testing.assert_allclose(values["prediction"], distribution.mean() - OFFSET, rtol=1e-12)
    np.testing.assert_allclose(values["sd"], distribution.std(), rtol=1e-10)
    np.testing.assert_allclose(values["variance"], distribution.var(), rtol=1e-10)
    np.testing.assert_allclose(values["exceedance"], distribution.sf(300.0 + OFFSET), rtol=1e-9, atol=1e-12)
    assert found.resolved.all() and found.kept.all() and set(values) == {"prediction", "variance", "sd", "exceedance"}


def test_median_backtransform_follows_the_choice(meuse, log_zinc):
    _, _, predictor = log_zinc
    xy = targets(meuse)
    found = predict_points(cell_predictor(predictor), xy, SurfaceScale(Transform("log", OFFSET)), ["prediction"])
    mu, _ = predictor.predict(xy)
    # The median of a lognormal exp(Y) is exp(mu) (Aitchison & Brown 1957, the lognormal distribution).
    np.testing.assert_allclose(found.layers[0]["prediction"], np.exp(mu) - OFFSET, rtol=1e-12)


def test_points_at_cell_centres_equal_the_rasters_of_write_surfaces(meuse, log_zinc, tmp_path):
    xy, values, predictor = log_zinc
    scale = SurfaceScale(Transform("log", OFFSET), threshold=500.0)
    kinds = ["prediction", "variance", "sd", "exceedance"]
    paths = {kind: str(tmp_path / f"{kind}.tif") for kind in kinds}
    check = ExtrapolationCheck.for_samples(xy, values, MEUSE_LOG_ZINC, predictor.mean, scale.transform, ["zinc"])
    write_surfaces(cell_predictor(predictor), GRID, None, scale, to_wkt2("EPSG:28992"),
                   [FieldRasters("zinc", paths, {})], check=check)
    centres = GRID.cell_centres(0, GRID.n_rows)
    found = predict_points(cell_predictor(predictor), centres, scale, kinds)
    for kind in kinds:
        dataset = gdal.Open(paths[kind])
        raster = dataset.GetRasterBand(1).ReadAsArray().astype(float).ravel()
        np.testing.assert_allclose(raster, found.layers[0][kind].astype(np.float32), rtol=0, atol=0)


def test_unresolved_points_are_nan_and_counted(meuse, log_zinc):
    xy, values, _ = log_zinc
    local = LocalKrigingPredictor(xy, values, MEUSE_LOG_ZINC, MeanModel.for_data("constant", xy), neighbours=16,
                                  search_radius=150.0)
    far = np.array([[meuse.xy[:, 0].min() - 5000.0, meuse.xy[:, 1].min() - 5000.0], meuse.xy[0] + 1.0])
    found = predict_points(cell_predictor(local), far, SurfaceScale(Transform("log", OFFSET)), ["prediction", "sd"])
    assert found.resolved.tolist() == [False, True]
    assert np.isnan(found.layers[0]["prediction"][0]) and np.isnan(found.layers[0]["sd"][0])
    assert np.isfinite(found.layers[0]["sd"][1])
