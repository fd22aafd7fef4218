"""Decision maps from fieldcast:predict: exceedance probability (THRESHOLD, OUTPUT_EXCEEDANCE) and cell support.

Data: the published Meuse topsoil samples and 40 m grid (Rikken & Van Rijn 1993, as shipped in Debian's
r-cran-sp package; tests/data/README.md), EPSG:28992 metres, zinc in ppm. The algorithms run in-process
through ``processing.run`` (tests/qgis_support.py) on an 80 m grid over the published grid's extent, masked
to its cells.
"""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import gdal
from qgis.core import (
    QgsApplication,
    QgsFeature,
    QgsGeometry,
    QgsProcessingException,
    QgsRectangle,
    QgsVectorLayer,
)
from scipy import stats
from scipy.spatial import cKDTree

from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.io.model_file import ModelDocument
from fieldcast.algorithms.predict.block import arithmetic_block_predict, block_predict
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures
from test_plugin_meuse import MEUSE_GRID_EXTENT, band, cell_centres

QUICK_LOG_FIT = {"TRANSFORM": "log", "KERNEL": "spherical", "ANISOTROPY": False, "TREND": "constant",
                 "METHOD": "reml"}
COARSE_CELL = 80.0
ZINC_THRESHOLD = 500.0  # ppm; a limit in the range of the Meuse zinc values (113 to 1839 ppm, meuse.csv)


COARSE_GRID = GridSpec.from_extent(*MEUSE_GRID_EXTENT, COARSE_CELL)
"""The grid predict makes for that extent: cell edges on whole multiples of 80 m, so x from 178400."""


def coarse_cell_index(xy: np.ndarray) -> np.ndarray:
    """Raster-order index of the 80 m cell that holds each point."""
    rows = ((COARSE_GRID.y_max - xy[:, 1]) // COARSE_CELL).astype(int)
    cols = ((xy[:, 0] - COARSE_GRID.x_min) // COARSE_CELL).astype(int)
    return rows * COARSE_GRID.n_cols + cols


def coarse_mask_centres(meuse_grid) -> np.ndarray:
    """Centres of the 80 m cells that hold at least one cell of the published 40 m grid."""
    return COARSE_GRID.cell_centres()[np.unique(coarse_cell_index(meuse_grid.xy))]


def grid_parameters(meuse, meuse_grid, model_path: str) -> dict:
    """Samples, model, the 80 m grid over the published grid's extent, masked to the cells covering that grid
    (and only by them: MAP_AREA extent)."""
    x_min, y_min, x_max, y_max = MEUSE_GRID_EXTENT
    return {"INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", "MODEL": model_path,
            "EXTENT": f"{x_min},{x_max},{y_min},{y_max} [EPSG:28992]", "PIXEL_SIZE": COARSE_CELL,
            "MASK": coarse_mask_layer(meuse_grid), "MAP_AREA": "extent"}


def coarse_mask_layer(meuse_grid) -> QgsVectorLayer:
    """The 80 m cells holding the published grid, as square polygons (EPSG:28992)."""
    layer = QgsVectorLayer("Polygon?crs=EPSG:28992", "coarse cells", "memory")
    half = COARSE_CELL / 2
    squares = [QgsGeometry.fromRect(QgsRectangle(x - half, y - half, x + half, y + half))
               for x, y in coarse_mask_centres(meuse_grid)]
    layer.dataProvider().addFeatures([QgsFeature() for _ in squares])
    for feature, square in zip(layer.getFeatures(), squares):
        layer.dataProvider().changeGeometryValues({feature.id(): square})
    return layer


@pytest.fixture(scope="module")
def zinc_model(qgis_processing, meuse, tmp_path_factory) -> str:  # noqa: F811
    """A log-zinc model file fitted by fieldcast:fitmodel."""
    path = tmp_path_factory.mktemp("decision-model") / "zinc.json"
    qgis_processing.run("fieldcast:fitmodel", {"INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}),
                                               "FIELD": "zinc", **QUICK_LOG_FIT, "OUTPUT_MODEL": str(path)})
    return str(path)


def predicted(processing, parameters: dict, folder, support: str) -> dict[str, np.ndarray]:
    """Run fieldcast:predict with every output; the bands (nodata as NaN) and the cell centres."""
    outputs = {name: str(folder / f"{support}_{name.lower()}.tif")
               for name in ("OUTPUT", "OUTPUT_VARIANCE", "OUTPUT_EXCEEDANCE")}
    processing.run("fieldcast:predict", {**parameters, "SUPPORT": support, "THRESHOLD": ZINC_THRESHOLD, **outputs})
    datasets = {name: gdal.Open(path) for name, path in outputs.items()}
    arrays = {name: band(dataset).ravel() for name, dataset in datasets.items()}
    arrays["centres"] = cell_centres(datasets["OUTPUT"])
    return arrays


@pytest.fixture(scope="module")
def point_and_cell(qgis_processing, meuse, meuse_grid, zinc_model, tmp_path_factory) -> dict:  # noqa: F811
    folder = tmp_path_factory.mktemp("decision-maps")
    parameters = grid_parameters(meuse, meuse_grid, zinc_model)
    return {support: predicted(qgis_processing, parameters, folder, support)
            for support in ("point", "cell", "cell_log")}


def engine_predictor(meuse, model_path: str) -> KrigingPredictor:
    document = ModelDocument.load(model_path)
    return KrigingPredictor(meuse.xy, np.log(meuse.zinc), document.covariance, document.mean)


def test_exceedance_is_the_normal_tail_of_the_kriging_mean_and_variance(point_and_cell, meuse, zinc_model):
    # Under the Gaussian model ln(zinc) at a cell is N(mu, s2) given the data, so P(zinc > t) =
    # P(ln zinc > ln t) = 1 - Phi((ln t - mu) / s) (the normal distribution function; scipy.stats.norm is
    # the reference), with mu, s2 the engine's kriging mean and latent-field variance at the cell centre.
    run = point_and_cell["point"]
    inside = np.isfinite(run["OUTPUT"])
    assert np.array_equal(np.isfinite(run["OUTPUT_EXCEEDANCE"]), inside)
    mu, s2 = engine_predictor(meuse, zinc_model).predict(run["centres"][inside])
    expected = stats.norm.sf(np.log(ZINC_THRESHOLD), loc=mu, scale=np.sqrt(s2))
    np.testing.assert_allclose(run["OUTPUT_EXCEEDANCE"][inside], expected, atol=1e-6)  # Float32 storage
    assert 0.0 <= np.min(expected) and np.max(expected) <= 1.0


def test_exceedance_is_high_along_the_river_and_low_far_from_it(point_and_cell, meuse_grid):
    # The Meuse grid's `dist` column is the normalised distance to the river (0 at the river, 1 farthest);
    # zinc comes with the river's flood sediment, so it is highest on the river bank (dataset documentation of
    # meuse and meuse.grid; Rikken & Van Rijn 1993).
    run = point_and_cell["point"]
    assert (run["centres"][0] == COARSE_GRID.cell_centres(0, 1)[0]).all()
    probability = run["OUTPUT_EXCEEDANCE"][coarse_cell_index(meuse_grid.xy)]  # 80 m cell of each 40 m cell
    assert np.all(np.isfinite(probability))
    near, far = probability[meuse_grid.dist < 0.1], probability[meuse_grid.dist > 0.4]
    assert len(near) > 100 and len(far) > 100
    assert np.mean(near) > 0.5 and np.mean(far) < 0.1


def test_log_scale_cell_support_is_block_kriging_of_the_cell_average(point_and_cell, meuse, zinc_model):
    # Block kriging of the cell average (Journel & Huijbregts 1978, Mining Geostatistics): the engine's
    # block_predict is the reference for the numbers (tests/test_block_kriging.py checks it against
    # scikit-learn); here the plugin must write its mean, lognormal variance and exceedance.
    point, cell = point_and_cell["point"], point_and_cell["cell_log"]
    inside = np.isfinite(cell["OUTPUT"])
    assert np.array_equal(inside, np.isfinite(point["OUTPUT"]))
    centres = cell["centres"][inside]
    mu, s2 = block_predict(engine_predictor(meuse, zinc_model), centres, COARSE_CELL)
    np.testing.assert_allclose(cell["OUTPUT"][inside], np.exp(mu), rtol=2e-6)
    # lognormal variance exp(2 mu + s2)(exp(s2) - 1) (Aitchison & Brown 1957)
    np.testing.assert_allclose(cell["OUTPUT_VARIANCE"][inside], np.exp(2 * mu + s2) * np.expm1(s2), rtol=1e-5)
    expected = stats.norm.sf(np.log(ZINC_THRESHOLD), loc=mu, scale=np.sqrt(s2))
    np.testing.assert_allclose(cell["OUTPUT_EXCEEDANCE"][inside], expected, atol=1e-6)
    assert np.max(np.abs(cell["OUTPUT"][inside] / point["OUTPUT"][inside] - 1.0)) > 1e-3


def test_cell_support_of_a_log_model_writes_the_arithmetic_cell_average(point_and_cell, meuse, zinc_model):
    # arithmetic_block_predict is the reference for the numbers (tests/predict/test_arithmetic_block.py checks it
    # against fine conditional simulations); the default median back-transform gives exp(mu) of its moment-matched
    # lognormal, the variance is the exact variance of the arithmetic average (Aitchison & Brown 1957).
    cell, log_scale = point_and_cell["cell"], point_and_cell["cell_log"]
    inside = np.isfinite(cell["OUTPUT"])
    mu, s2 = arithmetic_block_predict(engine_predictor(meuse, zinc_model), cell["centres"][inside], COARSE_CELL)
    np.testing.assert_allclose(cell["OUTPUT"][inside], np.exp(mu), rtol=2e-6)
    np.testing.assert_allclose(cell["OUTPUT_VARIANCE"][inside], np.exp(2 * mu + s2) * np.expm1(s2), rtol=1e-5)
    expected = stats.norm.sf(np.log(ZINC_THRESHOLD), loc=mu, scale=np.sqrt(s2))
    np.testing.assert_allclose(cell["OUTPUT_EXCEEDANCE"][inside], expected, atol=1e-6)
    assert np.mean(cell["OUTPUT"][inside]) > np.mean(log_scale["OUTPUT"][inside])


def test_cell_average_variance_is_below_the_point_variance_away_from_samples(point_and_cell, meuse):
    # Averaging over a block removes the nugget and part of the short-range variation, so the block error
    # variance is below the point error variance except where a sample sits by the cell centre (Journel &
    # Huijbregts 1978). For a log model variance / median^2 = exp(s2)(exp(s2) - 1) grows with s2 alone.
    point, cell = point_and_cell["point"], point_and_cell["cell"]
    inside = np.isfinite(cell["OUTPUT"])
    relative = {name: run["OUTPUT_VARIANCE"][inside] / run["OUTPUT"][inside] ** 2
                for name, run in (("point", point), ("cell", cell))}
    away = cKDTree(meuse.xy).query(cell["centres"][inside])[0] > 0.1 * COARSE_CELL
    assert np.count_nonzero(away) > 0.9 * len(away)
    assert np.all(relative["cell"][away] < relative["point"][away])


def test_exceedance_without_threshold_is_refused_and_writes_nothing(qgis_processing, meuse, meuse_grid,  # noqa: F811
                                                                    zinc_model, tmp_path):
    parameters = grid_parameters(meuse, meuse_grid, zinc_model)
    with pytest.raises(QgsProcessingException) as error:
        qgis_processing.run("fieldcast:predict", {**parameters, "OUTPUT": str(tmp_path / "zinc.tif"),
                                                  "OUTPUT_EXCEEDANCE": str(tmp_path / "above.tif")})
    assert "needs a threshold" in str(error.value) and "THRESHOLD" in str(error.value)
    assert list(tmp_path.iterdir()) == []


def test_help_explains_exceedance_and_support(fieldcast_plugin):  # noqa: F811
    help_text = QgsApplication.processingRegistry().algorithmById("fieldcast:predict").shortHelpString()
    for phrase in ("not a certainty", "attribute's own units", "log-transformed the same way", "block kriging",
                   "decisions taken per area"):
        assert phrase in help_text
