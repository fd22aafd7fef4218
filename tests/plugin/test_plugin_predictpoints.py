"""fieldcast:predictpoints through processing.run on the published Meuse data, against predict and scipy.stats.

Data: the Meuse topsoil samples (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp package;
tests/data/README.md), EPSG:28992 metres. Targets are cell centres of a predict run, so both tools must
give the same numbers there.
"""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import gdal
from pyproj import Transformer
from qgis.core import (
    NULL,
    QgsFeature,
    QgsField,
    QgsGeometry,
    QgsPointXY,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsVectorLayer,
)
from scipy import stats

from fieldcast.algorithms.io.model_file import ModelDocument
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from qgis_process_support import template_centres
from qgis_support import Log, field_type, fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures

FIT_SETTINGS = {"TRANSFORM": "log", "KERNEL": "spherical", "ANISOTROPY": False, "TREND": "constant",
                "METHOD": "reml"}
EXTENT = (179000.0, 330000.0, 180600.0, 332400.0)
CELL = 200.0
THRESHOLD = 500.0
RESULTS = ["zinc_est", "zinc_var", "zinc_sd", "zinc_pexc"]


def labelled_layer(xy: np.ndarray, crs: str = "EPSG:28992", extra: dict[str, str] | None = None) -> QgsVectorLayer:
    """Targets at ``xy`` with a text, a whole-number and a real field of their own (and ``extra`` real fields)."""
    layer = QgsVectorLayer(f"Point?crs={crs}", "targets", "memory")
    fields = [QgsField("well", field_type("String")), QgsField("depth", field_type("Int")),
              QgsField("level", field_type("Double")), *(QgsField(name, field_type("Double")) for name in extra or {})]
    layer.dataProvider().addAttributes(fields)
    layer.updateFields()
    features = []
    for row, (x, y) in enumerate(xy):
        feature = QgsFeature(layer.fields())
        feature.setGeometry(QgsGeometry.fromPointXY(QgsPointXY(float(x), float(y))))
        feature.setAttributes([f"W{row}", row * 3, row / 4, *(-1.0 for _ in extra or {})])
        features.append(feature)
    layer.dataProvider().addFeatures(features)
    return layer


def band(path) -> np.ndarray:
    """Band 1 of a GeoTIFF in raster order, nodata as NaN."""
    dataset = gdal.Open(str(path))
    raster = dataset.GetRasterBand(1)
    values = raster.ReadAsArray().astype(float).ravel()
    values[values == raster.GetNoDataValue()] = np.nan
    return values


def columns(path, names) -> dict[str, np.ndarray]:
    """The named fields of a written layer, in feature order (NULL as None)."""
    layer = QgsVectorLayer(str(path), "out", "ogr")
    assert layer.isValid()
    rows = [feature for feature in layer.getFeatures()]
    return {name: [None if feature[name] == NULL else feature[name] for feature in rows] for name in names}


@pytest.fixture(scope="module")
def meuse_predict(qgis_processing, meuse, tmp_path_factory):  # noqa: F811
    """A log-zinc model fitted on Meuse and a predict run on a 200 m grid with the exceedance raster."""
    folder = tmp_path_factory.mktemp("predictpoints")
    samples = point_layer(meuse.xy, {"zinc": meuse.zinc})
    model = qgis_processing.run("fieldcast:fitmodel", {"INPUT": samples, "FIELD": "zinc", **FIT_SETTINGS,
                                                       "OUTPUT_MODEL": str(folder / "zinc.json")})["OUTPUT_MODEL"]
    x_min, y_min, x_max, y_max = EXTENT
    rasters = {name: str(folder / f"{name}.tif") for name in RESULTS}
    qgis_processing.run("fieldcast:predict", {
        "INPUT": samples, "FIELD": "zinc", "MODEL": model, "EXTENT": f"{x_min},{x_max},{y_min},{y_max} [EPSG:28992]",
        "PIXEL_SIZE": CELL, "MAP_AREA": "extent", "THRESHOLD": THRESHOLD, "OUTPUT": rasters["zinc_est"],
        "OUTPUT_VARIANCE": rasters["zinc_var"], "OUTPUT_SD": rasters["zinc_sd"],
        "OUTPUT_EXCEEDANCE": rasters["zinc_pexc"]})
    return samples, model, rasters


def run_points(qgis_processing, samples, model, targets, path, feedback=None, **extra):  # noqa: F811
    return qgis_processing.run("fieldcast:predictpoints", {
        "INPUT": samples, "FIELD": "zinc", "MODEL": model, "TARGETS": targets, "THRESHOLD": THRESHOLD,
        "OUTPUT": str(path), **extra}, feedback=feedback)


def test_points_at_cell_centres_equal_the_predict_rasters_and_keep_their_fields(qgis_processing, meuse_predict,  # noqa: F811
                                                                                tmp_path):
    samples, model, rasters = meuse_predict
    centres = template_centres(rasters["zinc_est"])
    result = run_points(qgis_processing, samples, model, labelled_layer(centres), tmp_path / "points.gpkg")
    written = columns(result["OUTPUT"], ["well", "depth", "level", *RESULTS])
    for name in RESULTS:
        # The rasters hold Float32: equal to the points' doubles to single precision (IEEE 754, 2**-24).
        np.testing.assert_allclose(np.array(written[name], dtype=float), band(rasters[name]), rtol=2e-7,
                                   err_msg=name)
    assert written["well"] == [f"W{row}" for row in range(len(centres))]
    assert written["depth"] == [row * 3 for row in range(len(centres))]
    assert written["level"] == [row / 4 for row in range(len(centres))]
    layer = QgsVectorLayer(result["OUTPUT"], "out", "ogr")
    assert layer.crs().authid() == "EPSG:28992"
    assert [name for name in layer.fields().names() if name != "fid"] == ["well", "depth", "level", *RESULTS]


def test_targets_in_degrees_are_reprojected_and_keep_their_crs(qgis_processing, meuse_predict, tmp_path):  # noqa: F811
    samples, model, rasters = meuse_predict
    centres = template_centres(rasters["zinc_est"])
    # EPSG:28992 -> EPSG:4326 through PROJ (pyproj), as a user's GPS points would arrive.
    lon, lat = Transformer.from_crs("EPSG:28992", "EPSG:4326", always_xy=True).transform(centres[:, 0], centres[:, 1])
    result = run_points(qgis_processing, samples, model, labelled_layer(np.column_stack([lon, lat]), "EPSG:4326"),
                        tmp_path / "degrees.gpkg")
    written = columns(result["OUTPUT"], RESULTS)
    for name in RESULTS:
        # PROJ's way back from degrees is not the exact inverse: the round trip moves these points by a few
        # tenths of a millimetre, so the values agree to about 1e-5 instead of single precision.
        np.testing.assert_allclose(np.array(written[name], dtype=float), band(rasters[name]), rtol=2e-5,
                                   atol=1e-6 if name == "zinc_pexc" else 0.0, err_msg=name)
    assert QgsVectorLayer(result["OUTPUT"], "out", "ogr").crs().authid() == "EPSG:4326"


def test_log_model_sd_is_that_of_the_lognormal_predictive_distribution(qgis_processing, meuse_predict, meuse,  # noqa: F811
                                                                        tmp_path):
    samples, model, rasters = meuse_predict
    targets = meuse.xy[:20] + np.array([35.0, -20.0])
    result = run_points(qgis_processing, samples, model, labelled_layer(targets), tmp_path / "mean.gpkg",
                        BACKTRANSFORM="mean")
    written = columns(result["OUTPUT"], RESULTS)
    document = ModelDocument.load(model)
    offset = document.transform.offset
    mu, s2 = KrigingPredictor(meuse.xy, np.log(meuse.zinc + offset), document.covariance,
                              document.mean).predict(targets)
    # Reference library: scipy.stats.lognorm(s=sqrt(s2), scale=exp(mu)) is the law of exp(Y), Y ~ N(mu, s2);
    # the value is exp(Y) - offset: its mean shifts by the offset, its sd does not.
    distribution = stats.lognorm(s=np.sqrt(s2), scale=np.exp(mu))
    np.testing.assert_allclose(written["zinc_sd"], distribution.std(), rtol=1e-9)
    np.testing.assert_allclose(written["zinc_var"], distribution.var(), rtol=1e-9)
    np.testing.assert_allclose(written["zinc_est"], distribution.mean() - offset, rtol=1e-9)
    np.testing.assert_allclose(written["zinc_pexc"], distribution.sf(THRESHOLD + offset), rtol=1e-8, atol=1e-12)


def test_result_names_the_target_layer_has_get_a_number_and_the_log_says_so(qgis_processing, meuse_predict,  # noqa: F811
                                                                             meuse, tmp_path):
    samples, model, _ = meuse_predict
    log = Log()
    targets = labelled_layer(meuse.xy[:5] + 10.0, extra={"zinc_est": "", "ZINC_SD": ""})
    result = run_points(qgis_processing, samples, model, targets, tmp_path / "clash.gpkg", feedback=log)
    names = [name for name in QgsVectorLayer(result["OUTPUT"], "out", "ogr").fields().names() if name != "fid"]
    assert names == ["well", "depth", "level", "zinc_est", "ZINC_SD", "zinc_est_2", "zinc_var", "zinc_sd_2",
                     "zinc_pexc"]
    assert columns(result["OUTPUT"], ["zinc_est"])["zinc_est"] == [-1.0] * 5
    assert any("zinc_est as zinc_est_2" in line and "zinc_sd as zinc_sd_2" in line for line in log.lines)


def test_a_shapefile_gets_names_clipped_to_ten_characters(qgis_processing, meuse, tmp_path):  # noqa: F811
    samples = point_layer(meuse.xy, {"zinc_topsoil": meuse.zinc})
    log = Log()
    result = qgis_processing.run("fieldcast:predictpoints", {
        "INPUT": samples, "FIELD": "zinc_topsoil", "TARGETS": labelled_layer(meuse.xy[:3] + 5.0),
        "THRESHOLD": THRESHOLD, "OUTPUT": str(tmp_path / "clipped.shp")}, feedback=log)
    names = QgsVectorLayer(result["OUTPUT"], "out", "ogr").fields().names()
    # A dBASE table holds field names of up to 10 characters (common practice for shapefiles).
    assert names[3:] == ["zinc_t_est", "zinc_t_var", "zinc_to_sd", "zinc__pexc"]
    assert any("up to 10 characters" in line for line in log.lines)
    assert any("No model file given" in line for line in log.lines)


def test_features_without_geometry_are_copied_with_empty_results_and_counted(qgis_processing, meuse_predict,  # noqa: F811
                                                                              meuse, tmp_path):
    samples, model, _ = meuse_predict
    targets = labelled_layer(meuse.xy[:4] + 10.0)
    feature = QgsFeature(targets.fields())
    feature.setAttributes(["nowhere", 7, 0.5])
    targets.dataProvider().addFeatures([feature])
    log = Log()
    result = run_points(qgis_processing, samples, model, targets, tmp_path / "empty.gpkg", feedback=log)
    written = columns(result["OUTPUT"], ["well", "zinc_est", "zinc_sd"])
    assert written["well"][-1] == "nowhere" and written["zinc_est"][-1] is None and written["zinc_sd"][-1] is None
    assert all(value > 0 for value in written["zinc_est"][:4])
    assert any(line.startswith("1 target feature(s) have no geometry") for line in log.lines)
    assert any("Predicted at 4 of 5 target points" in line for line in log.lines)


def test_targets_beyond_the_search_radius_get_empty_results_counted(qgis_processing, meuse_predict, meuse,  # noqa: F811
                                                                     tmp_path):
    samples, model, _ = meuse_predict
    targets = labelled_layer(np.vstack([meuse.xy[:3] + 10.0, [[170000.0, 320000.0]]]))
    log = Log()
    result = run_points(qgis_processing, samples, model, targets, tmp_path / "local.gpkg", feedback=log,
                        NEIGHBOURS=16, SEARCH_RADIUS=300.0)
    written = columns(result["OUTPUT"], ["zinc_est"])["zinc_est"]
    assert written[3] is None and all(value is not None for value in written[:3])
    assert any(line.startswith("1 target point(s) get no value (NULL)") for line in log.lines)
    assert any("each target point from its 16 nearest samples" in line for line in log.lines)
    assert any(line.startswith("Neighbourhood check: at 3 target points drawn at random") for line in log.lines)


def test_a_multipoint_of_several_points_is_refused_and_nothing_written(qgis_processing, meuse_predict, tmp_path):  # noqa: F811
    samples, model, _ = meuse_predict
    targets = QgsVectorLayer("MultiPoint?crs=EPSG:28992", "targets", "memory")
    feature = QgsFeature()
    feature.setGeometry(QgsGeometry.fromMultiPointXY([QgsPointXY(179500, 331000), QgsPointXY(179600, 331100)]))
    targets.dataProvider().addFeatures([feature])
    with pytest.raises(QgsProcessingException, match=r"multipoint with 2 points.*Multipart to singleparts"):
        run_points(qgis_processing, samples, model, targets, tmp_path / "multi.gpkg")
    assert not (tmp_path / "multi.gpkg").exists()


def test_targets_without_crs_or_features_are_refused(qgis_processing, meuse_predict, tmp_path):  # noqa: F811
    samples, model, _ = meuse_predict
    with pytest.raises(QgsProcessingException, match=r"TARGETS"):
        run_points(qgis_processing, samples, model, point_layer(np.array([[179500.0, 331000.0]]), {}, crs=None),
                   tmp_path / "nocrs.gpkg")
    with pytest.raises(QgsProcessingException, match=r"target layer \(TARGETS\) is empty"):
        run_points(qgis_processing, samples, model, point_layer(np.zeros((0, 2)), {}), tmp_path / "none.gpkg")
    assert list(tmp_path.iterdir()) == []


def test_output_on_the_target_file_is_refused(qgis_processing, meuse_predict, meuse, tmp_path):  # noqa: F811
    samples, model, _ = meuse_predict
    first = run_points(qgis_processing, samples, model, labelled_layer(meuse.xy[:3] + 10.0), tmp_path / "t.gpkg")
    before = (tmp_path / "t.gpkg").read_bytes()
    with pytest.raises(QgsProcessingException, match=r"OUTPUT would overwrite the input file .*\(TARGETS\)"):
        run_points(qgis_processing, samples, model, first["OUTPUT"], tmp_path / "t.gpkg")
    assert (tmp_path / "t.gpkg").read_bytes() == before


def test_cancel_leaves_no_output(qgis_processing, meuse_predict, meuse, tmp_path):  # noqa: F811
    samples, model, _ = meuse_predict
    feedback = QgsProcessingFeedback()
    feedback.cancel()
    with pytest.raises(QgsProcessingException, match="Cancelled; no output was written"):
        run_points(qgis_processing, samples, model, labelled_layer(meuse.xy[:3] + 10.0), tmp_path / "c.gpkg",
                   feedback=feedback)
    assert list(tmp_path.iterdir()) == []


def test_several_chunks_of_targets_each_get_their_own_values(qgis_processing, meuse_predict, meuse,  # noqa: F811
                                                             tmp_path):
    samples, model, _ = meuse_predict
    rng = np.random.default_rng(11)
    low, high = meuse.xy.min(axis=0), meuse.xy.max(axis=0)
    targets = low + rng.random((5000, 2)) * (high - low)  # more than one chunk of 4,096 features
    result = run_points(qgis_processing, samples, model, labelled_layer(targets), tmp_path / "many.gpkg")
    written = columns(result["OUTPUT"], ["well", "zinc_est"])
    order = [int(name[1:]) for name in written["well"]]
    document = ModelDocument.load(model)
    mu, _ = KrigingPredictor(meuse.xy, np.log(meuse.zinc + document.transform.offset), document.covariance,
                             document.mean).predict(targets[order])
    # The median back-transform of a log model is exp(mu) - offset (the lognormal median, Aitchison & Brown 1957).
    np.testing.assert_allclose(written["zinc_est"], np.exp(mu) - document.transform.offset, rtol=1e-9)
    assert sorted(order) == list(range(5000))


@pytest.mark.parametrize("extra, message", [
    ({"NEIGHBOURS": 1}, r"NEIGHBOURS is 1, but the constant mean of the model needs at least 2 samples per target "
                        r"point\. Set NEIGHBOURS to 2 or more"),
    ({"BACKTRANSFORM": "mode"}, r"BACKTRANSFORM \(Back-transform \(transformed models\)\) must be one of median, mean"),
    ({"NEIGHBOURS": 8, "SEARCH_RADIUS": -5.0}, r"SEARCH_RADIUS"),
])
def test_bad_neighbourhood_or_backtransform_is_refused_and_nothing_written(qgis_processing, meuse_predict,  # noqa: F811
                                                                          meuse, tmp_path, extra, message):
    samples, model, _ = meuse_predict
    with pytest.raises(QgsProcessingException, match=message):
        run_points(qgis_processing, samples, model, labelled_layer(meuse.xy[:3] + 10.0), tmp_path / "bad.gpkg",
                   **extra)
    assert list(tmp_path.iterdir()) == []
