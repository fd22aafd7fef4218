"""Prediction rasters carry a back-transform tag only when the model has a transform to undo.

Samples: the published Meuse topsoil data (Rikken & Van Rijn 1993; tests/data/README.md), EPSG:28992 metres.
"""
from __future__ import annotations

import pytest
from osgeo import gdal

from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures
from test_plugin_meuse import MEUSE_GRID_EXTENT


@pytest.mark.parametrize(("transform", "tagged"), [("none", False), ("log", True)])
def test_the_backtransform_tag_follows_the_models_transform(qgis_processing, meuse, tmp_path,  # noqa: F811
                                                            transform, tagged):
    layer = point_layer(meuse.xy, {"zinc": meuse.zinc})
    model = str(tmp_path / "zinc.json")
    qgis_processing.run("fieldcast:fitmodel", {"INPUT": layer, "FIELD": "zinc", "TRANSFORM": transform,
                                               "KERNEL": "exponential", "ANISOTROPY": False, "OUTPUT_MODEL": model})
    x_min, y_min, x_max, y_max = MEUSE_GRID_EXTENT
    output = str(tmp_path / "zinc.tif")
    qgis_processing.run("fieldcast:predict", {"INPUT": layer, "FIELD": "zinc", "MODEL": model, "PIXEL_SIZE": 200.0,
                                              "EXTENT": f"{x_min},{x_max},{y_min},{y_max} [EPSG:28992]",
                                              "OUTPUT": output})
    metadata = gdal.Open(output).GetMetadata()
    assert ("fieldcast_backtransform" in metadata) is tagged
    if tagged:
        assert metadata["fieldcast_backtransform"] == "median"
    assert metadata["fieldcast_support"] == "point"
