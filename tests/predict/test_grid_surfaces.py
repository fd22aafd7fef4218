"""Standard-error and predictive-quantile rasters of write_surfaces on Meuse log-zinc, against scipy.stats.

Data: the Meuse topsoil samples (Rikken & Van Rijn 1993; tests/data/README.md), EPSG:28992 metres.
"""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import gdal
from scipy import stats

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.io.crs import to_wkt2
from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.grid_surfaces import FieldRasters, SurfaceScale, cell_predictor, write_surfaces
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from reference import MEUSE_LOG_ZINC

GRID = GridSpec(x_min=178600.0, y_max=333600.0, pixel_size=100.0, n_cols=20, n_rows=25)
KINDS = ("prediction", "variance", "sd", "lower", "upper")
MODEL = MEUSE_LOG_ZINC  # the usual Meuse log-zinc model (tests/reference.py; from memory)


def band(path) -> np.ndarray:
    """Band 1 of a GeoTIFF as float64, raster order."""
    dataset = gdal.Open(str(path))  # held while the band is read (a band outliving its dataset crashes)
    return dataset.GetRasterBand(1).ReadAsArray().astype(float).ravel()


def description(path) -> str:
    """Band 1's description."""
    dataset = gdal.Open(str(path))
    return dataset.GetRasterBand(1).GetDescription()


@pytest.fixture(scope="module")
def kriged(meuse):
    """Modelling-scale kriging mean and variance at the cell centres of GRID."""
    predictor = KrigingPredictor(meuse.xy, np.log(meuse.zinc + 1.0), MODEL, MeanModel.for_data("constant", meuse.xy))
    return predictor, predictor.predict(GRID.cell_centres(0, GRID.n_rows))


def write(predictor, folder, scale: SurfaceScale) -> dict[str, str]:
    paths = {kind: str(folder / f"{kind}.tif") for kind in KINDS}
    write_surfaces(cell_predictor(predictor, "point", GRID.pixel_size), GRID, None, scale, to_wkt2("EPSG:28992"),
                   [FieldRasters("zinc", paths, {})])
    return paths


def test_log_model_quantiles_and_sd_are_those_of_scipy_lognorm(kriged, tmp_path):
    predictor, (mu, s2) = kriged
    paths = write(predictor, tmp_path, SurfaceScale(Transform("log", 1.0), interval=0.8))
    # Reference library: scipy.stats.lognorm(s=sqrt(s2), scale=exp(mu)) is the distribution of exp(Y) for
    # Y ~ N(mu, s2); Z = exp(Y) - offset, so its quantiles shift by the offset and its sd does not.
    distribution = stats.lognorm(s=np.sqrt(s2), scale=np.exp(mu))
    np.testing.assert_allclose(band(paths["lower"]), distribution.ppf(0.1) - 1.0, rtol=2e-6)
    np.testing.assert_allclose(band(paths["upper"]), distribution.ppf(0.9) - 1.0, rtol=2e-6)
    np.testing.assert_allclose(band(paths["sd"]), distribution.std(), rtol=2e-6)
    np.testing.assert_allclose(band(paths["sd"]) ** 2, band(paths["variance"]), rtol=5e-6)
    median = band(paths["prediction"])
    assert np.all(band(paths["lower"]) < median) and np.all(median < band(paths["upper"]))
    # Skewed: the upper end lies farther from the median than the lower one.
    assert np.all(band(paths["upper"]) - median > median - band(paths["lower"]))
    descriptions = {kind: description(path) for kind, path in paths.items()}
    assert descriptions["lower"].startswith("10 % quantile of zinc") and "lognormal" in descriptions["lower"]
    assert descriptions["upper"].startswith("90 % quantile of zinc")
    assert descriptions["sd"].startswith("standard error of zinc") and "exp(mu + s2/2)" in descriptions["sd"]


def test_untransformed_quantiles_are_normal_ones(kriged, tmp_path):
    predictor, (mu, s2) = kriged
    paths = write(predictor, tmp_path, SurfaceScale(Transform()))
    # Reference library: scipy.stats.norm(mu, sqrt(s2)) quantiles at 5 % and 95 % (default interval 0.9).
    distribution = stats.norm(mu, np.sqrt(s2))
    np.testing.assert_allclose(band(paths["lower"]), distribution.ppf(0.05), rtol=2e-6)
    np.testing.assert_allclose(band(paths["upper"]), distribution.ppf(0.95), rtol=2e-6)
    np.testing.assert_allclose(band(paths["sd"]), np.sqrt(s2), rtol=2e-6)


@pytest.mark.parametrize("interval", [0.0, 1.0, -0.2, 1.5, float("nan")])
def test_interval_outside_zero_one_is_refused(interval):
    with pytest.raises(FieldcastError, match=r"INTERVAL_PROBABILITY\) must lie strictly between 0 and 1"):
        SurfaceScale(Transform(), interval=interval)
