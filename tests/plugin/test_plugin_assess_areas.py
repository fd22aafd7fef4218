"""fieldcast:assessareas through processing.run on the published Meuse data with polygons built here.

Data: the Meuse topsoil samples (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp package;
tests/data/README.md), EPSG:28992 metres. The expected averages are computed here from the model file's
covariance by simple numpy algebra (the lognormal mean exp(mu + s2/2), Aitchison & Brown 1957).
"""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import ogr
from qgis.core import NULL, QgsFeature, QgsField, QgsGeometry, QgsProcessingException, QgsVectorLayer

from fieldcast.algorithms.io.model_file import ModelDocument
from fieldcast.algorithms.io.polygons import discretise_polygon
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from qgis_support import field_type, fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures

UNITS = [
    "POLYGON ((179900 331500, 180300 331500, 180300 331900, 179900 331900, 179900 331500))",
    "POLYGON ((180300 332300, 180800 332300, 180800 332700, 180300 332700, 180300 332300),"
    " (180450 332420, 180650 332420, 180650 332580, 180450 332580, 180450 332420))",
    "MULTIPOLYGON (((179200 330400, 179500 330400, 179500 330700, 179200 330700, 179200 330400)),"
    " ((179700 330400, 179900 330400, 179900 330600, 179700 330600, 179700 330400)))",
    "POLYGON ((180000 331600, 180100 331600, 180100 331600.01, 180000 331600.01, 180000 331600))",
    None,
]
RESULTS = ["zinc_mean_2", "zinc_sd", "zinc_pexc", "zinc_p10", "zinc_p50", "zinc_p90", "zinc_area", "zinc_above",
           "zinc_vol10", "zinc_vol50", "zinc_vol90", "zinc_ctr"]


def unit_layer() -> QgsVectorLayer:
    """The units above with a name, a depth and a field already called zinc_mean."""
    layer = QgsVectorLayer("MultiPolygon?crs=EPSG:28992", "units", "memory")
    layer.dataProvider().addAttributes([QgsField("unit", field_type("String")), QgsField("depth", field_type("Double")),
                                        QgsField("zinc_mean", field_type("Double"))])
    layer.updateFields()
    features = []
    for row, wkt in enumerate(UNITS):
        feature = QgsFeature(layer.fields())
        if wkt is not None:
            feature.setGeometry(QgsGeometry.fromWkt(wkt))
        feature.setAttributes([f"U{row}", 0.5, -1.0])
        features.append(feature)
    layer.dataProvider().addFeatures(features)
    return layer


@pytest.fixture(scope="module")
def meuse_model(qgis_processing, meuse, tmp_path_factory):  # noqa: F811
    folder = tmp_path_factory.mktemp("assessareas")
    samples = point_layer(meuse.xy, {"zinc": meuse.zinc})
    model = qgis_processing.run("fieldcast:fitmodel", {
        "INPUT": samples, "FIELD": "zinc", "TRANSFORM": "log", "KERNEL": "spherical", "ANISOTROPY": False,
        "TREND": "constant", "METHOD": "reml", "OUTPUT_MODEL": str(folder / "zinc.json")})["OUTPUT_MODEL"]
    return samples, model


def test_units_get_the_exact_lognormal_average_and_keep_their_fields(qgis_processing, meuse, meuse_model,  # noqa: F811
                                                                     tmp_path):
    samples, model = meuse_model
    result = qgis_processing.run("fieldcast:assessareas", {
        "INPUT": samples, "FIELD": "zinc", "MODEL": model, "AREAS": unit_layer(), "THRESHOLD": 500.0,
        "REALIZATIONS": 500, "DEPTH_FIELD": "depth", "OUTPUT": str(tmp_path / "units.gpkg")})
    layer = QgsVectorLayer(result["OUTPUT"], "out", "ogr")
    assert [name for name in layer.fields().names() if name != "fid"] == ["unit", "depth", "zinc_mean", *RESULTS]
    rows = list(layer.getFeatures())
    assert [row["unit"] for row in rows] == [f"U{i}" for i in range(len(UNITS))]
    assert [row["zinc_mean"] for row in rows] == [-1.0] * len(UNITS)
    document = ModelDocument.load(model)
    offset = document.transform.offset
    predictor = KrigingPredictor(meuse.xy, np.log(meuse.zinc + offset), document.covariance, document.mean)
    for row, wkt in zip(rows, UNITS[:-1]):
        points = discretise_polygon(bytes(ogr.CreateGeometryFromWkt(wkt).ExportToWkb())).points
        mu, s2 = predictor.predict(points)
        # lognormal mean of each point, exp(mu + s2/2) - offset, averaged over the polygon's points
        assert row["zinc_mean_2"] == pytest.approx(np.mean(np.exp(mu + s2 / 2)) - offset, rel=1e-7)
        assert row["zinc_p10"] <= row["zinc_p50"] <= row["zinc_p90"]
        assert 0.0 <= row["zinc_pexc"] <= 1.0 and 0.0 <= row["zinc_above"] <= 1.0
        assert row["zinc_vol10"] <= row["zinc_vol50"] <= row["zinc_vol90"] <= row["zinc_area"] * 0.5 + 1e-6
    assert rows[2]["zinc_area"] == pytest.approx(300 * 300 + 200 * 200)  # both parts of the multipolygon
    assert [row["zinc_ctr"] for row in rows[:4]] == [0, 0, 0, 1]  # the sliver is kriged at its centroid
    assert all(rows[4][name] == NULL for name in RESULTS)  # no geometry: copied with empty results


def test_no_threshold_is_refused_and_writes_nothing(qgis_processing, meuse_model, tmp_path):  # noqa: F811
    samples, model = meuse_model
    target = tmp_path / "none.gpkg"
    with pytest.raises(QgsProcessingException, match="Set THRESHOLD to the limit in the attribute's units"):
        qgis_processing.run("fieldcast:assessareas", {"INPUT": samples, "FIELD": "zinc", "MODEL": model,
                                                      "AREAS": unit_layer(), "OUTPUT": str(target)})
    assert not target.exists()


def test_a_depth_field_and_a_depth_together_are_refused(qgis_processing, meuse_model, tmp_path):  # noqa: F811
    samples, model = meuse_model
    with pytest.raises(QgsProcessingException, match=r"Give a depth field \(DEPTH_FIELD\) or a constant depth"):
        qgis_processing.run("fieldcast:assessareas", {
            "INPUT": samples, "FIELD": "zinc", "MODEL": model, "AREAS": unit_layer(), "THRESHOLD": 500.0,
            "DEPTH_FIELD": "depth", "DEPTH": 1.0, "OUTPUT": str(tmp_path / "both.gpkg")})
    assert not (tmp_path / "both.gpkg").exists()
