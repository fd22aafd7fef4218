"""fieldcast:predictmany with text value fields holding numbers and "<x" limits.

Data: the published Meuse topsoil samples (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp package;
tests/data/README.md): the cadmium and copper values at each metal's smallest value are written as "<value", as a
laboratory would report them, beside cadmium as numbers with a 0/1 mark of the same limits.
"""
from __future__ import annotations

import json

import numpy as np
import pytest
from osgeo import gdal
from qgis.core import (
    QgsFeature,
    QgsField,
    QgsGeometry,
    QgsPointXY,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsVectorLayer,
)
from qgis.PyQt.QtCore import QDate

from qgis_process_support import write_point_geopackage
from qgis_support import field_type, fieldcast_plugin, qgis_processing  # noqa: F401 - fixtures

RUN = {"TRANSFORM": "log", "KERNEL": "exponential", "ANISOTROPY": False,
       "EXTENT": "178440,181560,329600,333760 [EPSG:28992]", "PIXEL_SIZE": 400.0}


def limit_texts(values: np.ndarray) -> list[str]:
    """Each value as text, those at the smallest value as "<value"."""
    return [f"<{v:g}" if v == values.min() else f"{v:g}" for v in values]


def band(path) -> np.ndarray:
    return gdal.Open(str(path)).ReadAsArray()


def test_text_fields_with_limits_are_read_per_field(qgis_processing, meuse, tmp_path):  # noqa: F811
    cd_limits = int(np.sum(meuse.cadmium == meuse.cadmium.min()))
    cu_limits = int(np.sum(meuse.copper == meuse.copper.min()))
    layer = write_point_geopackage(tmp_path / "metals.gpkg", "samples", meuse.xy, {
        "cd_text": limit_texts(meuse.cadmium), "cu_text": limit_texts(meuse.copper),
        "cd": [float(v) for v in meuse.cadmium], "below": [int(v == meuse.cadmium.min()) for v in meuse.cadmium]})
    feedback = QgsProcessingFeedback()
    qgis_processing.run("fieldcast:predictmany", {"INPUT": layer, "FIELDS": ["cd_text", "cu_text"], **RUN,
                                                  "OUTPUT_FOLDER": str(tmp_path / "text")}, feedback=feedback)
    log = feedback.textLog()
    n = len(meuse.cadmium)
    assert f'{cd_limits} of {n} values of cd_text are below a reporting limit ({cd_limits} written as "<limit")' in log
    assert f'{cu_limits} of {n} values of cu_text are below a reporting limit ({cu_limits} written as "<limit")' in log
    for field, count in (("cd_text", cd_limits), ("cu_text", cu_limits)):
        with open(tmp_path / "text" / f"{field}_model.json", encoding="utf-8") as stream:
            assert json.load(stream)["fit"]["censored"]["count"] == count
    # the same limits given as a 0/1 mark beside numbers give the same (seeded) fit and surfaces
    qgis_processing.run("fieldcast:predictmany", {"INPUT": layer, "FIELDS": ["cd"], "BELOW_LIMIT_FIELD": "below",
                                                  **RUN, "OUTPUT_FOLDER": str(tmp_path / "marked")})
    np.testing.assert_allclose(band(tmp_path / "text" / "cd_text_prediction.tif"),
                               band(tmp_path / "marked" / "cd_prediction.tif"), rtol=1e-6)


def test_a_field_neither_numeric_nor_text_is_refused(qgis_processing, meuse, tmp_path):  # noqa: F811
    layer = QgsVectorLayer("Point?crs=EPSG:28992", "samples", "memory")
    layer.dataProvider().addAttributes([QgsField("day", field_type("Date"))])
    layer.updateFields()
    features = []
    for x, y in meuse.xy[:40]:
        feature = QgsFeature(layer.fields())
        feature.setGeometry(QgsGeometry.fromPointXY(QgsPointXY(x, y)))
        feature.setAttributes([QDate(2020, 1, 1)])
        features.append(feature)
    layer.dataProvider().addFeatures(features)
    folder = tmp_path / "out"
    with pytest.raises(QgsProcessingException, match="not numbers or text such as \"<0.5\". Leave it out of 'Value "
                                                     "fields'"):
        qgis_processing.run("fieldcast:predictmany", {"INPUT": layer, "FIELDS": ["day"], **RUN,
                                                      "OUTPUT_FOLDER": str(folder)})
    assert not folder.exists() or not any(folder.iterdir())
