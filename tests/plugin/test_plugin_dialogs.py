"""What the toolbox dialogs show: the main page without expert parameters, the value field, search words and help."""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from osgeo import ogr, osr
from qgis.core import (
    QgsApplication,
    QgsProcessingDestinationParameter,
    QgsProcessingException,
    QgsProcessingParameterDefinition,
)

from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures

MAIN_PAGE_INPUTS = {
    "fitmodel": {"INPUT", "FIELD", "TRANSFORM", "KERNEL", "ANISOTROPY", "TREND", "METHOD"},
    "predict": {"INPUT", "FIELD", "MODEL", "EXTENT", "PIXEL_SIZE", "MASK", "THRESHOLD"},
    "predictmany": {"INPUT", "FIELDS", "TRANSFORM", "KERNEL", "ANISOTROPY", "TREND", "METHOD", "SHARED_MODEL",
                    "EXTENT", "PIXEL_SIZE", "MASK"},
    "simulate": {"INPUT", "FIELD", "MODEL", "EXTENT", "PIXEL_SIZE", "MASK", "REALIZATIONS", "THRESHOLD"},
    "crossvalidate": {"INPUT", "FIELD", "MODEL"},
}
EXPERT = {"NEIGHBOURS", "SEARCH_RADIUS", "SUPPORT", "BACKTRANSFORM", "TARGET_CRS", "LOG_OFFSET", "SEED"}


def algorithm(name: str):
    return QgsApplication.processingRegistry().algorithmById(f"fieldcast:{name}")


def is_advanced(definition: QgsProcessingParameterDefinition) -> bool:
    return bool(definition.flags() & QgsProcessingParameterDefinition.FlagAdvanced)


@pytest.mark.parametrize("name", sorted(MAIN_PAGE_INPUTS))
def test_main_page_shows_only_the_everyday_inputs(fieldcast_plugin, name):  # noqa: F811
    # Outputs are left out of the count: they sit in the dialog's own output section.
    inputs = [d for d in algorithm(name).parameterDefinitions()
              if not isinstance(d, QgsProcessingDestinationParameter)]
    assert {d.name() for d in inputs if not is_advanced(d)} == MAIN_PAGE_INPUTS[name]
    assert all(is_advanced(d) for d in inputs if d.name() in EXPERT)


def geopackage_with_fid(path: Path) -> Path:
    """A GeoPackage point layer with its feature id ``fid``, a text label and a numeric ``zinc``."""
    source = ogr.GetDriverByName("GPKG").CreateDataSource(str(path))
    crs = osr.SpatialReference()
    crs.ImportFromEPSG(28992)
    layer = source.CreateLayer("samples", crs, ogr.wkbPoint)
    layer.CreateField(ogr.FieldDefn("label", ogr.OFTString))
    layer.CreateField(ogr.FieldDefn("zinc", ogr.OFTReal))
    for index in range(3):
        feature = ogr.Feature(layer.GetLayerDefn())
        feature.SetField("label", f"s{index}")
        feature.SetField("zinc", 100.0 * (index + 1))
        point = ogr.Geometry(ogr.wkbPoint)
        point.AddPoint_2D(181000.0 + index, 333000.0 + index)
        feature.SetGeometry(point)
        layer.CreateFeature(feature)
    source = None
    return path


def test_value_field_widget_does_not_preselect_the_feature_id(tmp_path):
    names = ["fitmodel", "predict", "simulate", "crossvalidate"]
    result = subprocess.run([sys.executable, str(Path(__file__).with_name("field_widget_choice.py")),
                             str(geopackage_with_fid(tmp_path / "samples.gpkg")), *names],
                            capture_output=True, text=True, timeout=120, check=True)
    assert json.loads(result.stdout.strip().splitlines()[-1]) == dict.fromkeys(names)


@pytest.mark.parametrize("name", ["fitmodel", "predict", "simulate", "crossvalidate"])
def test_run_without_value_field_is_refused_with_advice(qgis_processing, tmp_path, name):  # noqa: F811
    layer = point_layer(np.array([[0.0, 0.0], [10.0, 0.0], [0.0, 10.0]]), {"zinc": np.array([1.0, 2.0, 3.0])})
    with pytest.raises(QgsProcessingException, match=r"No value field chosen.*'Value field' \(FIELD\)"):
        qgis_processing.run(f"fieldcast:{name}", {"INPUT": layer, "OUTPUT": str(tmp_path / "out.tif")})
    assert list(tmp_path.iterdir()) == []
