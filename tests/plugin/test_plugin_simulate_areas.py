"""fieldcast:simulate with AREAS: the area (and volume) above the threshold per polygon and realisation.

Meuse log-zinc (published data, tests/data/README.md) on the 80 m grid of test_plugin_decision_maps; the
polygons are built here. The reference counts, in the written realisations, the cells whose centre GDAL/OGR's
(GEOS) point-in-polygon predicate puts inside each polygon and whose value exceeds the threshold.
"""
from __future__ import annotations

import csv

import numpy as np
import pytest
from osgeo import ogr
from qgis.core import QgsFeature, QgsGeometry, QgsProcessingException, QgsVectorLayer

from qgis_process_support import template_centres
from qgis_support import fieldcast_plugin, qgis_processing  # noqa: F401 - fixtures
from test_plugin_decision_maps import COARSE_CELL, ZINC_THRESHOLD, grid_parameters, zinc_model  # noqa: F401
from test_plugin_simulate import bands

UNITS = ["POLYGON ((179900 331500, 180300 331500, 180300 331900, 179900 331900, 179900 331500))",
         "MULTIPOLYGON (((180300 332300, 180800 332300, 180800 332700, 180300 332700, 180300 332300),"
         " (180450 332420, 180650 332420, 180650 332580, 180450 332580, 180450 332420)),"
         " ((179200 330400, 179500 330400, 179500 330700, 179200 330700, 179200 330400)))"]


def unit_layer() -> QgsVectorLayer:
    layer = QgsVectorLayer("MultiPolygon?crs=EPSG:28992", "units", "memory")
    features = []
    for wkt in UNITS:
        feature = QgsFeature(layer.fields())
        feature.setGeometry(QgsGeometry.fromWkt(wkt))
        features.append(feature)
    layer.dataProvider().addFeatures(features)
    return layer


def test_polygon_table_counts_the_cells_above_the_threshold_in_each_realisation(qgis_processing, meuse,  # noqa: F811
                                                                               meuse_grid, zinc_model, tmp_path):  # noqa: F811
    raster, table = tmp_path / "fields.tif", tmp_path / "units.csv"
    qgis_processing.run("fieldcast:simulate", {
        **grid_parameters(meuse, meuse_grid, zinc_model), "REALIZATIONS": 5, "SEED": 3, "THRESHOLD": ZINC_THRESHOLD,
        "AREAS": unit_layer(), "DEPTH": 0.3, "OUTPUT": str(raster), "OUTPUT_AREAS": str(table)})
    realisations, _ = bands(raster)
    values = realisations.reshape(len(realisations), -1)
    centres = template_centres(str(raster))
    with open(table, newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    assert len(rows) == len(UNITS) * 5
    assert any(float(row["area_above"]) > 0 for row in rows)  # the river unit holds zinc above the threshold
    for index, wkt in enumerate(UNITS):
        geometry = ogr.CreateGeometryFromWkt(wkt)
        members = np.array([geometry.Contains(ogr.CreateGeometryFromWkt(f"POINT ({x} {y})")) for x, y in centres])
        members &= np.all(np.isfinite(values), axis=0)
        expected = np.count_nonzero(values[:, members] > ZINC_THRESHOLD, axis=1) * COARSE_CELL ** 2
        mine = [row for row in rows if int(row["feature_id"]) == index + 1]
        assert [int(row["realisation"]) for row in mine] == [1, 2, 3, 4, 5]
        np.testing.assert_allclose([float(row["area_above"]) for row in mine], expected)
        np.testing.assert_allclose([float(row["volume_above"]) for row in mine], expected * 0.3)


def test_areas_without_a_threshold_are_refused_and_write_nothing(qgis_processing, meuse, meuse_grid,  # noqa: F811
                                                                 zinc_model, tmp_path):  # noqa: F811
    with pytest.raises(QgsProcessingException, match="set THRESHOLD, or leave AREAS empty"):
        qgis_processing.run("fieldcast:simulate", {
            **grid_parameters(meuse, meuse_grid, zinc_model), "REALIZATIONS": 2, "AREAS": unit_layer(),
            "OUTPUT": str(tmp_path / "fields.tif"), "OUTPUT_AREAS": str(tmp_path / "units.csv")})
    assert list(tmp_path.iterdir()) == []
