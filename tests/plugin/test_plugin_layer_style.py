"""Output rasters load into a project named by field and quantity and coloured by a ramp per quantity.

Runs go through ``processing.run`` with a context whose project is ``QgsProject.instance()`` and outputs asked
to load into it (as the dialog's "Open output file after running" does); then Processing's own
``handleAlgorithmResults`` loads them and runs the layer post-processors, as QGIS does after a dialog run.
Data: the published Meuse samples (tests/data/README.md), EPSG:28992 metres.
"""
from __future__ import annotations

import gc

import numpy as np
import pytest
from osgeo import gdal
from qgis.core import (
    QgsApplication,
    QgsProcessingContext,
    QgsProcessingFeedback,
    QgsProcessingOutputLayerDefinition,
    QgsProject,
    QgsRasterLayer,
    QgsRasterMinMaxOrigin,
    QgsSingleBandPseudoColorRenderer,
)

from fieldcast.plugin import layer_style
from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures

GRID = {"EXTENT": "178600,181400,329800,333600 [EPSG:28992]", "PIXEL_SIZE": 200.0}
"""A coarse grid over the Meuse samples: the looks, not the numbers, are checked here."""


def run_and_load(processing, algorithm: str, parameters: dict, loaded: tuple[str, ...]) -> dict:
    """Run ``algorithm`` with the outputs ``loaded`` asked to load into the project, then load them as QGIS does.

    Returns the loaded layers by name. The post-processors must survive a garbage collection between the run
    and the loading (QGIS keeps no Python reference to them).
    """
    from processing.gui.Postprocessing import handleAlgorithmResults

    project = QgsProject.instance()
    context = QgsProcessingContext()
    context.setProject(project)
    feedback = QgsProcessingFeedback()
    parameters = {name: QgsProcessingOutputLayerDefinition(value, project) if name in loaded else value
                  for name, value in parameters.items()}
    processing.run(algorithm, parameters, context=context, feedback=feedback)
    gc.collect()
    alg = QgsApplication.processingRegistry().algorithmById(algorithm)
    assert handleAlgorithmResults(alg, context, feedback, parameters=parameters)
    return {layer.name(): layer for layer in project.mapLayers().values()}


@pytest.fixture()
def project():
    """QgsProject.instance(), emptied after the test; post-processors left by earlier tests' runs (whose contexts
    are gone, so nothing can call them) are let go first, so each test sees only its own."""
    layer_style._WAITING.clear()
    yield QgsProject.instance()
    QgsProject.instance().removeAllMapLayers()


@pytest.fixture(scope="module")
def samples(meuse):
    return point_layer(meuse.xy, {"zinc": meuse.zinc, "copper": meuse.copper})


def band_range(path: str) -> tuple[float, float]:
    """Minimum and maximum of band 1 of a GeoTIFF, nodata left out (read with GDAL, not through QGIS)."""
    dataset = gdal.Open(path)  # kept while its band is read
    band = dataset.GetRasterBand(1)
    values = band.ReadAsArray().astype(float)
    values = values[values != band.GetNoDataValue()]
    return float(values.min()), float(values.max())


def ramp_colours(layer) -> list[tuple[float, str]]:
    """``(value, "#rrggbb")`` of the colour ramp items of a pseudocolour layer."""
    shader = layer.renderer().shader().rasterShaderFunction()
    return [(item.value, item.color.name()) for item in shader.colorRampItemList()]


def assert_stretched(layer, path: str) -> None:
    """A pseudocolour renderer stretched over the raster's own minimum and maximum."""
    renderer = layer.renderer()
    assert isinstance(renderer, QgsSingleBandPseudoColorRenderer)
    assert renderer.minMaxOrigin().limits() == QgsRasterMinMaxOrigin.MinMax
    assert (renderer.classificationMin(), renderer.classificationMax()) == pytest.approx(band_range(path), rel=1e-6)


def assert_probability(layer) -> None:
    """A pseudocolour renderer fixed to 0-1, whatever the raster holds."""
    renderer = layer.renderer()
    assert isinstance(renderer, QgsSingleBandPseudoColorRenderer)
    assert renderer.minMaxOrigin().limits() == QgsRasterMinMaxOrigin.None_
    assert (renderer.classificationMin(), renderer.classificationMax()) == (0.0, 1.0)
    assert ramp_colours(layer)[0][0] == 0.0 and ramp_colours(layer)[-1][0] == 1.0


def test_predict_layers_are_named_and_coloured(qgis_processing, samples, project, tmp_path):  # noqa: F811 - fixture
    paths = {name: str(tmp_path / f"{name.lower()}.tif") for name in ("OUTPUT", "OUTPUT_VARIANCE",
                                                                       "OUTPUT_EXCEEDANCE")}
    layers = run_and_load(qgis_processing, "fieldcast:predict",
                          {"INPUT": samples, "FIELD": "zinc", **GRID, "THRESHOLD": 500.0, **paths}, tuple(paths))
    assert set(layers) == {"zinc \u2014 prediction", "zinc \u2014 variance", "zinc \u2014 probability above 500"}
    assert_stretched(layers["zinc \u2014 prediction"], paths["OUTPUT"])
    assert_stretched(layers["zinc \u2014 variance"], paths["OUTPUT_VARIANCE"])
    assert_probability(layers["zinc \u2014 probability above 500"])
    assert band_range(paths["OUTPUT_EXCEEDANCE"]) != (0.0, 1.0)  # so 0-1 is not merely the data's own range
    assert ramp_colours(layers["zinc \u2014 prediction"]) != ramp_colours(layers["zinc \u2014 variance"])
    assert layer_style._WAITING == []  # every post-processor ran and was let go


def test_a_probability_has_one_colour_in_every_run(qgis_processing, samples, project, tmp_path):  # noqa: F811 - fixture
    colours = []
    for threshold in (200.0, 900.0):
        path = str(tmp_path / f"above-{threshold:g}.tif")
        layers = run_and_load(qgis_processing, "fieldcast:predict",
                              {"INPUT": samples, "FIELD": "zinc", **GRID, "THRESHOLD": threshold,
                               "OUTPUT": str(tmp_path / f"prediction-{threshold:g}.tif"), "OUTPUT_EXCEEDANCE": path},
                              ("OUTPUT_EXCEEDANCE",))
        layer = layers[f"zinc \u2014 probability above {threshold:g}"]
        assert_probability(layer)
        colours.append(ramp_colours(layer))
    assert colours[0] == colours[1]


def test_simulate_layers_are_named_and_coloured(qgis_processing, samples, project, tmp_path):  # noqa: F811 - fixture
    paths = {name: str(tmp_path / f"{name.lower()}.tif") for name in ("OUTPUT", "OUTPUT_MEAN", "OUTPUT_STDDEV",
                                                                       "OUTPUT_EXCEEDANCE", "OUTPUT_P90")}
    layers = run_and_load(qgis_processing, "fieldcast:simulate",
                          {"INPUT": samples, "FIELD": "zinc", **GRID, "THRESHOLD": 500.0, "REALIZATIONS": 8,
                           "SEED": 3, **paths}, tuple(paths))
    names = {"OUTPUT": "realisations", "OUTPUT_MEAN": "mean of realisations",
             "OUTPUT_STDDEV": "standard deviation of realisations", "OUTPUT_P90": "90th percentile of realisations",
             "OUTPUT_EXCEEDANCE": "share of realisations above 500"}
    assert set(layers) == {f"zinc \u2014 {words}" for words in names.values()}
    for name in ("OUTPUT", "OUTPUT_MEAN", "OUTPUT_STDDEV", "OUTPUT_P90"):
        assert_stretched(layers[f"zinc \u2014 {names[name]}"], paths[name])
    assert_probability(layers["zinc \u2014 share of realisations above 500"])


def test_predictmany_loads_each_fields_rasters_styled(qgis_processing, samples, project, tmp_path):  # noqa: F811 - fixture
    layers = run_and_load(qgis_processing, "fieldcast:predictmany",
                          {"INPUT": samples, "FIELDS": ["zinc", "copper"], **GRID, "SHARED_MODEL": True,
                           "OUTPUT_FOLDER": str(tmp_path)}, ())
    assert set(layers) == {f"{field} \u2014 {quantity}" for field in ("zinc", "copper")
                           for quantity in ("prediction", "variance", "standard error")}
    assert_stretched(layers["copper \u2014 prediction"], str(tmp_path / "copper_prediction.tif"))
    assert_stretched(layers["zinc \u2014 variance"], str(tmp_path / "zinc_variance.tif"))


def test_predictmany_without_a_project_loads_nothing(qgis_processing, samples, project, tmp_path):  # noqa: F811 - fixture
    context = QgsProcessingContext()  # no project, as for a run outside any project
    qgis_processing.run("fieldcast:predictmany", {"INPUT": samples, "FIELDS": ["zinc"], **GRID,
                                                  "OUTPUT_FOLDER": str(tmp_path)}, context=context)
    assert (tmp_path / "zinc_prediction.tif").exists()
    assert context.layersToLoadOnCompletion() == {} and layer_style._WAITING == []


def test_without_loading_no_post_processor_is_kept(qgis_processing, samples, project, tmp_path):  # noqa: F811 - fixture
    qgis_processing.run("fieldcast:predict", {"INPUT": samples, "FIELD": "zinc", **GRID,
                                              "OUTPUT": str(tmp_path / "prediction.tif")})
    assert layer_style._WAITING == [] and project.mapLayers() == {}


@pytest.mark.parametrize("values, expected", [([3.0, 3.0], (2.5, 3.5)), ([np.nan, np.nan], (0.0, 1.0))])
def test_constant_or_empty_raster_still_gets_a_ramp(values, expected, tmp_path):
    path = str(tmp_path / "flat.tif")
    dataset = gdal.GetDriverByName("GTiff").Create(path, 2, 1, 1, gdal.GDT_Float32)
    dataset.SetGeoTransform((0.0, 1.0, 0.0, 1.0, 0.0, -1.0))
    band = dataset.GetRasterBand(1)
    band.SetNoDataValue(-9999.0)
    band.WriteArray(np.nan_to_num(np.array([values]), nan=-9999.0))
    dataset = None
    layer = QgsRasterLayer(path, "flat")
    assert layer_style.value_range(layer, layer_style.LOOKS["prediction"]) == expected
