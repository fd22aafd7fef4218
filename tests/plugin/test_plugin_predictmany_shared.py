"""'Predict surfaces for several fields' with one correlation model for all fields (SHARED_MODEL).

Data: the published Meuse topsoil samples (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp package;
tests/data/README.md), EPSG:28992 metres: zinc, copper and lead in ppm, log transform. The check is an
identity: kriging is linear in the data and its weights do not change when the covariance is multiplied by
a number (Cressie 1993, Statistics for Spatial Data, section 3.4), so one kriging pass for all fields must give
each field's prediction and variance from its own model file, computed here by the engine one field at a time.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from osgeo import gdal
from qgis.core import QgsProcessingException

from fieldcast.algorithms.fit.options import FitOptions
from fieldcast.algorithms.fit.shared import fit_shared
from fieldcast.algorithms.io.model_file import ModelDocument
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.predict.local import LocalKrigingPredictor
from qgis_support import CancelAfterFirstProgress, fieldcast_plugin, point_layer, qgis_processing  # noqa: F401

FIT = {"TRANSFORM": "log", "KERNEL": "spherical", "ANISOTROPY": True, "TREND": "constant", "METHOD": "reml",
       "SHARED_MODEL": True}
# MAP_AREA extent: every cell of the extent, so the cancel test's kriging spans more than one chunk of cells.
GRID = {"EXTENT": "178440,181560,329600,333760 [EPSG:28992]", "PIXEL_SIZE": 80.0, "MAP_AREA": "extent"}
METALS = ("zinc", "copper", "lead")


def cells_and_values(path: Path) -> tuple[np.ndarray, np.ndarray]:
    """Centres (k, 2) and values (k,) of the cells of band 1 that hold data."""
    dataset = gdal.Open(str(path))
    band = dataset.GetRasterBand(1)
    values = band.ReadAsArray().astype(float)
    left, width, _, top, _, height = dataset.GetGeoTransform()
    rows, cols = np.nonzero(values != band.GetNoDataValue())
    return np.column_stack([left + (cols + 0.5) * width, top + (rows + 0.5) * height]), values[rows, cols]


@pytest.fixture(scope="module")
def layer(meuse):
    return point_layer(meuse.xy, {name: getattr(meuse, name) for name in METALS})


@pytest.mark.parametrize("neighbours", [0, 24])
def test_one_pass_gives_each_field_its_own_kriging(qgis_processing, meuse, layer, tmp_path, neighbours):  # noqa: F811
    folder = tmp_path / "shared"
    result = qgis_processing.run("fieldcast:predictmany", {
        "INPUT": layer, "FIELDS": list(METALS), **FIT, **GRID, "NEIGHBOURS": neighbours, "OUTPUT_FOLDER": str(folder)})
    assert result["COUNT"] == 3
    logs = np.log(np.column_stack([getattr(meuse, name) for name in METALS]))
    expected = fit_shared(meuse.xy, logs, FitOptions(kernel="spherical", anisotropy=True), list(METALS))
    transform = Transform("log")
    for name, engine_fit in zip(METALS, expected):
        document = ModelDocument.load(str(folder / f"{name}_model.json"))
        assert document.covariance.sill == pytest.approx(engine_fit.covariance.sill, rel=1e-9)
        assert document.covariance.structures[0].range == pytest.approx(
            expected[0].covariance.structures[0].range, rel=1e-9)  # one correlation model for all
        assert "shared by 3 fields" in document.fit["likelihood"]
        centres, prediction = cells_and_values(folder / f"{name}_prediction.tif")
        _, variance = cells_and_values(folder / f"{name}_variance.tif")
        values = np.log(getattr(meuse, name))
        if neighbours:
            predictor = LocalKrigingPredictor(meuse.xy, values, document.covariance, document.mean,
                                              neighbours=neighbours)
        else:
            predictor = KrigingPredictor(meuse.xy, values, document.covariance, document.mean)
        mean, latent_variance = predictor.predict(centres)
        np.testing.assert_allclose(prediction, transform.back_median(mean), rtol=1e-6)  # Float32 round-off
        np.testing.assert_allclose(variance, transform.back_variance(mean, latent_variance), rtol=1e-5)


def test_fields_with_different_samples_are_refused(qgis_processing, meuse, tmp_path):  # noqa: F811
    lead = np.array(meuse.lead, dtype=float)
    lead[::10] = np.nan
    gappy = point_layer(meuse.xy, {"zinc": meuse.zinc, "lead": lead})
    with pytest.raises(QgsProcessingException, match="needs every field measured at the same samples"):
        qgis_processing.run("fieldcast:predictmany", {
            "INPUT": gappy, "FIELDS": ["zinc", "lead"], **FIT, **GRID, "OUTPUT_FOLDER": str(tmp_path / "out")})
    assert not list((tmp_path / "out").iterdir())


def test_variogram_fitting_is_refused_with_advice(qgis_processing, layer, tmp_path):  # noqa: F811
    with pytest.raises(QgsProcessingException,
                       match="choose METHOD reml or ml, or turn off 'One correlation model for all fields'"):
        qgis_processing.run("fieldcast:predictmany", {
            "INPUT": layer, "FIELDS": ["zinc", "lead"], **FIT, "METHOD": "wls", **GRID,
            "OUTPUT_FOLDER": str(tmp_path / "out")})
    assert not list((tmp_path / "out").iterdir())


def test_cancel_leaves_no_file(qgis_processing, layer, tmp_path):  # noqa: F811
    folder = tmp_path / "cancelled"
    with pytest.raises(QgsProcessingException, match="Cancelled: no file was written"):
        qgis_processing.run("fieldcast:predictmany", {
            "INPUT": layer, "FIELDS": list(METALS), **FIT, **GRID, "OUTPUT_FOLDER": str(folder)},
            feedback=CancelAfterFirstProgress(start_percent=45.0))
    assert not list(folder.iterdir())
