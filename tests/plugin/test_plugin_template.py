"""TEMPLATE on predict, predictmany and simulate: outputs on the template's exact grid and CRS, checked with GDAL.

Data: the published Meuse topsoil samples (Rikken & Van Rijn 1993, tests/data/README.md), EPSG:28992 metres. The
template rasters are built with GDAL (tests/qgis_process_support.py), their top-left corner 178605 / 333615 off
the multiples of the 40 m cells. Predictions at the cell centres are compared with the engine's kriging at those
centres and with predictpoints there.
"""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import gdal
from pyproj import Transformer
from qgis.core import QgsFeature, QgsGeometry, QgsProcessingException, QgsRectangle, QgsVectorLayer

from fieldcast.algorithms.io.crs import to_wkt2
from fieldcast.algorithms.io.model_file import ModelDocument
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from qgis_process_support import COLUMNS, ROWS, template_centres, write_template
from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures
from reference import MEUSE_LOG_ZINC

THRESHOLD = 500.0
# The predictpoints field holding the value of each predict output raster.
POINT_RESULTS = {"zinc_est": "OUTPUT", "zinc_var": "OUTPUT_VARIANCE", "zinc_sd": "OUTPUT_SD",
                 "zinc_pexc": "OUTPUT_EXCEEDANCE"}


def model_file(path, xy: np.ndarray, crs: str) -> str:
    """The Meuse log-zinc model (tests/reference.py) as a model file whose distances are in ``crs``."""
    document = ModelDocument(MEUSE_LOG_ZINC, MeanModel.for_data("constant", xy), np.zeros(1), Transform("log"),
                             to_wkt2(crs), "metre", "zinc")
    document.save(str(path))
    return str(path)


def band_values(path: str) -> np.ndarray:
    """Band 1 as float64 with nodata cells as NaN."""
    dataset = gdal.Open(path)
    band = dataset.GetRasterBand(1)
    values = band.ReadAsArray().astype(float)
    values[values == band.GetNoDataValue()] = np.nan
    return values


def assert_same_grid(output: str, template: str) -> None:
    """``output`` has exactly the geotransform, size and CRS of ``template`` (as GDAL reads them)."""
    written, expected = gdal.Open(output), gdal.Open(template)
    assert written.GetGeoTransform() == expected.GetGeoTransform()
    assert (written.RasterXSize, written.RasterYSize) == (expected.RasterXSize, expected.RasterYSize)
    assert written.GetSpatialRef().IsSame(expected.GetSpatialRef())


def engine_median(xy: np.ndarray, zinc: np.ndarray, targets: np.ndarray) -> np.ndarray:
    """Kriging of log zinc with the engine directly, back-transformed to the median exp(mu), as (rows, cols)."""
    mean, _ = KrigingPredictor(xy, np.log(zinc), MEUSE_LOG_ZINC, MeanModel.for_data("constant", xy)).predict(targets)
    return np.exp(mean).reshape(ROWS, COLUMNS)


def run_refused(processing, algorithm: str, parameters: dict, folder, *fragments: str) -> None:
    """Run ``algorithm``; it must fail with every fragment in its message and leave no output file."""
    before = sorted(path.name for path in folder.iterdir())
    with pytest.raises(QgsProcessingException) as caught:
        processing.run(algorithm, parameters)
    for fragment in fragments:
        assert fragment in str(caught.value), str(caught.value)
    assert sorted(path.name for path in folder.iterdir()) == before


@pytest.fixture(scope="module")
def template_run(qgis_processing, meuse, tmp_path_factory):  # noqa: F811
    """A predict run on the template with every surface output; returns the template, outputs and inputs."""
    folder = tmp_path_factory.mktemp("template")
    template = write_template(folder / "template.tif")
    outputs = {name: str(folder / f"{name.lower()}.tif") for name in POINT_RESULTS.values()}
    inputs = {"INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc",
              "MODEL": model_file(folder / "model.json", meuse.xy, "EPSG:28992"), "THRESHOLD": THRESHOLD}
    qgis_processing.run("fieldcast:predict", {**inputs, "TEMPLATE": template, "MAP_AREA": "extent", **outputs})
    return template, outputs, inputs


def test_prediction_takes_the_template_grid_exactly(template_run):
    template, outputs, _ = template_run
    for path in outputs.values():
        assert_same_grid(path, template)


def test_prediction_at_cell_centres_is_the_engine_kriging(template_run, meuse):
    template, outputs, _ = template_run
    expected = engine_median(meuse.xy, meuse.zinc, template_centres(template))
    written = band_values(outputs["OUTPUT"])
    inside = np.ones((ROWS, COLUMNS), dtype=bool)
    inside[:10, :20] = False
    np.testing.assert_allclose(written[inside], expected[inside], rtol=1e-5)  # Float32 storage


def test_template_cells_equal_predictpoints_at_their_centres(template_run, qgis_processing, tmp_path):  # noqa: F811
    # Issue 12's check: a template whose origin is off the cell-size multiples gives outputs with exactly its
    # geotransform, size and CRS, and cell values equal to predictpoints at the cell centres.
    template, outputs, inputs = template_run
    for path in outputs.values():
        assert_same_grid(path, template)
    result = qgis_processing.run("fieldcast:predictpoints", {
        **inputs, "TARGETS": point_layer(template_centres(template), {}),
        "OUTPUT": str(tmp_path / "centres.gpkg")})
    layer = QgsVectorLayer(result["OUTPUT"], "centres", "ogr")
    features = list(layer.getFeatures())
    assert len(features) == ROWS * COLUMNS
    inside = np.ones((ROWS, COLUMNS), dtype=bool)
    inside[:10, :20] = False  # the template's nodata block: nodata in the rasters, predicted at the points
    for field, output in POINT_RESULTS.items():
        points = np.array([feature[field] for feature in features], dtype=float).reshape(ROWS, COLUMNS)
        # The rasters hold Float32: equal to the points' doubles to single precision (IEEE 754, 2**-24);
        # the exceedance gets an absolute floor for probabilities that round to 0 in either.
        np.testing.assert_allclose(band_values(outputs[output])[inside], points[inside], rtol=2e-7,
                                   atol=1e-7 if field == "zinc_pexc" else 0.0, err_msg=field)


def test_template_nodata_cells_stay_nodata(template_run):
    _, outputs, _ = template_run
    for path in outputs.values():
        values = band_values(path)
        assert np.isnan(values[:10, :20]).all()
        assert np.isfinite(values[10:]).all() and np.isfinite(values[:, 20:]).all()


def test_without_the_nodata_mask_every_template_cell_is_mapped(qgis_processing, meuse, tmp_path):  # noqa: F811
    template = write_template(tmp_path / "template.tif")
    output = str(tmp_path / "prediction.tif")
    qgis_processing.run("fieldcast:predict", {
        "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc",
        "MODEL": model_file(tmp_path / "model.json", meuse.xy, "EPSG:28992"), "TEMPLATE": template,
        "TEMPLATE_NODATA_MASK": False, "MAP_AREA": "extent", "OUTPUT": output})
    assert_same_grid(output, template)
    np.testing.assert_allclose(band_values(output), engine_median(meuse.xy, meuse.zinc, template_centres(template)),
                               rtol=1e-5)


def test_template_in_another_projected_crs_reprojects_the_samples(qgis_processing, meuse, tmp_path):  # noqa: F811
    # EPSG:32631 (WGS 84 / UTM zone 31N) against the samples' EPSG:28992; the samples are transformed with pyproj.
    to_utm = Transformer.from_crs("EPSG:28992", "EPSG:32631", always_xy=True)
    utm = np.column_stack(to_utm.transform(meuse.xy[:, 0], meuse.xy[:, 1]))
    corner = (np.floor(utm[:, 0].min()) - 13.3, np.ceil(utm[:, 1].max()) + 7.1)
    size = (int(np.ptp(utm[:, 0]) // 40) + 2, int(np.ptp(utm[:, 1]) // 40) + 2)
    template = write_template(tmp_path / "utm.tif", (corner[0], 40.0, 0.0, corner[1], 0.0, -40.0), 32631, size,
                              nodata_block=False)
    output = str(tmp_path / "prediction.tif")
    qgis_processing.run("fieldcast:predict", {
        "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc",
        "MODEL": model_file(tmp_path / "model.json", utm, "EPSG:32631"), "TEMPLATE": template,
        "MAP_AREA": "extent", "OUTPUT": output})
    assert_same_grid(output, template)
    mean, _ = KrigingPredictor(utm, np.log(meuse.zinc), MEUSE_LOG_ZINC,
                               MeanModel.for_data("constant", utm)).predict(template_centres(template))
    np.testing.assert_allclose(band_values(output).ravel(), np.exp(mean), rtol=1e-5)


def test_predictmany_writes_on_the_template_grid(qgis_processing, meuse, tmp_path):  # noqa: F811
    template = write_template(tmp_path / "template.tif")
    folder = tmp_path / "fields"
    qgis_processing.run("fieldcast:predictmany", {
        "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc, "lead": meuse.lead}), "FIELDS": ["zinc", "lead"],
        "TRANSFORM": "log", "KERNEL": "exponential", "ANISOTROPY": False, "TEMPLATE": template,
        "OUTPUT_FOLDER": str(folder)})
    for field in ("zinc", "lead"):
        for kind in ("prediction", "variance", "sd"):
            path = str(folder / f"{field}_{kind}.tif")
            assert_same_grid(path, template)
            assert np.isnan(band_values(path)[:10, :20]).all()


def test_simulate_writes_on_the_template_grid(qgis_processing, meuse, tmp_path):  # noqa: F811
    template = write_template(tmp_path / "template.tif")
    outputs = {"OUTPUT": str(tmp_path / "realisations.tif"), "OUTPUT_MEAN": str(tmp_path / "mean.tif")}
    qgis_processing.run("fieldcast:simulate", {
        "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc",
        "MODEL": model_file(tmp_path / "model.json", meuse.xy, "EPSG:28992"), "TEMPLATE": template,
        "REALIZATIONS": 2, **outputs})
    for path in outputs.values():
        assert_same_grid(path, template)
        values = band_values(path)
        assert np.isnan(values[:10, :20]).all() and np.isfinite(values[10:]).all()


@pytest.mark.parametrize(("extra", "fragments"), [
    ({"EXTENT": "178600,181400,329700,333600 [EPSG:28992]"},
     ("so EXTENT cannot be set", "Leave EXTENT empty to use the template's grid", "leave TEMPLATE empty")),
    ({"PIXEL_SIZE": 25.0}, ("so PIXEL_SIZE cannot be set", "Leave PIXEL_SIZE empty")),
    ({"TARGET_CRS": "EPSG:32631"}, ("'Target CRS' (TARGET_CRS)", "Leave 'Target CRS' empty")),
])
def test_template_beside_grid_or_crs_settings_is_refused(qgis_processing, meuse, tmp_path, extra,  # noqa: F811
                                                         fragments):
    template = write_template(tmp_path / "template.tif")
    run_refused(qgis_processing, "fieldcast:predict", {
        "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc",
        "MODEL": model_file(tmp_path / "model.json", meuse.xy, "EPSG:28992"), "TEMPLATE": template,
        "OUTPUT": str(tmp_path / "prediction.tif"), **extra}, tmp_path, *fragments)


@pytest.mark.parametrize(("geotransform", "epsg", "fragments"), [
    ((5.72, 0.0005, 0.0, 51.0, 0.0, -0.0005), 4326, ("a CRS in degrees", "Warp the template to a projected CRS")),
    ((178605.0, 40.0, 0.0, 333615.0, 0.0, -25.0), 28992, ("cells of 40 x 25 CRS units", "square cells")),
])
def test_templates_the_grid_cannot_take_are_refused(qgis_processing, meuse, tmp_path, geotransform, epsg,  # noqa: F811
                                                    fragments):
    template = write_template(tmp_path / "template.tif", geotransform, epsg)
    run_refused(qgis_processing, "fieldcast:simulate", {
        "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", "TEMPLATE": template,
        "OUTPUT": str(tmp_path / "realisations.tif")}, tmp_path, "template raster 'template' (TEMPLATE)", *fragments)


def test_a_model_fitted_in_another_crs_than_the_template_is_refused(qgis_processing, meuse, tmp_path):  # noqa: F811
    template = write_template(tmp_path / "utm.tif", (690000.0, 40.0, 0.0, 5655000.0, 0.0, -40.0), 32631)
    run_refused(qgis_processing, "fieldcast:predict", {
        "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc",
        "MODEL": model_file(tmp_path / "model.json", meuse.xy, "EPSG:28992"), "TEMPLATE": template,
        "OUTPUT": str(tmp_path / "prediction.tif")}, tmp_path, "Choose a template in", "EPSG:28992")


def test_a_template_away_from_the_samples_is_refused(qgis_processing, meuse, tmp_path):  # noqa: F811
    template = write_template(tmp_path / "template.tif", (190005.0, 40.0, 0.0, 340015.0, 0.0, -40.0))
    run_refused(qgis_processing, "fieldcast:predict", {
        "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc",
        "MODEL": model_file(tmp_path / "model.json", meuse.xy, "EPSG:28992"), "TEMPLATE": template,
        "OUTPUT": str(tmp_path / "prediction.tif")}, tmp_path, "does not overlap the samples", "leave TEMPLATE empty")


def test_mask_polygons_only_over_template_nodata_are_refused(qgis_processing, meuse, tmp_path):  # noqa: F811
    # The polygon covers exactly the template's nodata block: the top-left 20 columns and 10 rows.
    template = write_template(tmp_path / "template.tif")
    mask = QgsVectorLayer("Polygon?crs=EPSG:28992", "mask", "memory")
    feature = QgsFeature()
    feature.setGeometry(QgsGeometry.fromRect(QgsRectangle(178605.0, 333215.0, 179405.0, 333615.0)))
    mask.dataProvider().addFeatures([feature])
    run_refused(qgis_processing, "fieldcast:predict", {
        "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc",
        "MODEL": model_file(tmp_path / "model.json", meuse.xy, "EPSG:28992"), "TEMPLATE": template,
        "MASK": mask, "OUTPUT": str(tmp_path / "prediction.tif")}, tmp_path,
        "No cell inside the mask polygons has a value", "Set TEMPLATE_NODATA_MASK to false")


def test_a_template_that_is_all_nodata_is_refused_as_mask(qgis_processing, meuse, tmp_path):  # noqa: F811
    template = write_template(tmp_path / "template.tif", size=(20, 10))  # nothing but the nodata block
    run_refused(qgis_processing, "fieldcast:simulate", {
        "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc",
        "MODEL": model_file(tmp_path / "model.json", meuse.xy, "EPSG:28992"), "TEMPLATE": template,
        "OUTPUT": str(tmp_path / "realisations.tif")}, tmp_path, "is nodata, so as a mask it keeps no cell",
        "Set TEMPLATE_NODATA_MASK to false")
