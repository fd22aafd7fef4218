"""End-to-end runs of the Fieldcast toolbox algorithms through ``qgis_process.bin``.

The samples are the published Meuse data set (topsoil heavy metals of the Meuse flood
plain near Stein, NL; Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp package
and converted to tests/data/meuse.csv, see tests/data/README.md). The test writes them to
a GeoPackage in EPSG:28992 (Amersfoort / RD New), the CRS the data set is published in.

Each run starts QGIS once (several seconds), so the settings keep the fits small:
one covariance family, no anisotropy.
"""
from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pytest
from osgeo import gdal, ogr, osr

from fieldcast.algorithms.io.covariates import CovariateSource, SampleCovariates
from fieldcast.algorithms.io.crs import to_wkt2
from fieldcast.algorithms.io.model_file import ModelDocument
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from qgis_process_support import (
    COLUMNS,
    MEUSE_METALS,
    MEUSE_TEMPLATE,
    QGIS_PROCESS,
    ROWS,
    make_profile,
    run_algorithm,
    template_centres,
    write_fit_then_predict_model,
    write_geopackage_without_srs,
    write_meuse_geopackage,
    write_template,
)
from qgis_support import fieldcast_plugin  # noqa: F401 - fixture: a QgsApplication to build the .model3 in
from reference import calibrated_coverage_range, calibrated_msdr_range, load_meuse_grid, write_meuse_covariates
from requirements_check import skip_unless_available

pytestmark = skip_unless_available(QGIS_PROCESS is not None, "qgis_process.bin is not installed")

FIT_SETTINGS = {"TRANSFORM": "log", "KERNEL": "spherical", "ANISOTROPY": False, "TREND": "constant",
                "METHOD": "reml"}
# Cell centres of the published 40 m Meuse grid (tests/data/meuse_grid.csv) run from x 178460 to 181540
# and y 329620 to 333740; this extent puts the raster cell edges half a cell outside them.
MEUSE_GRID_EXTENT = "178440,181560,329600,333760 [EPSG:28992]"
MEUSE_CELL = 40.0


@pytest.fixture(scope="module")
def profile(tmp_path_factory) -> Path:
    """A throwaway QGIS profile with this repository enabled as the plugin ``fieldcast``."""
    return make_profile(tmp_path_factory.mktemp("qgis-profile"))


@pytest.fixture(scope="module")
def meuse_layer(tmp_path_factory) -> str:
    """The Meuse samples as a GeoPackage point layer; returns its OGR URI."""
    return write_meuse_geopackage(tmp_path_factory.mktemp("meuse") / "meuse.gpkg")


def fit(profile: Path, layer: str, field: str, model_path: Path) -> dict:
    """Run fieldcast:fitmodel with :data:`FIT_SETTINGS`; return the written model document."""
    run = run_algorithm(profile, "fieldcast:fitmodel",
                        {"INPUT": layer, "FIELD": field, **FIT_SETTINGS, "OUTPUT_MODEL": model_path})
    assert run.returncode == 0, run.messages
    return json.loads(model_path.read_text(encoding="utf-8"))


def predict(profile: Path, layer: str, field: str, model_path: Path, raster_path: Path, **extra) -> None:
    """Run fieldcast:predict on every cell of the Meuse grid extent (MAP_AREA extent) with 40 m cells."""
    run = run_algorithm(profile, "fieldcast:predict",
                        {"INPUT": layer, "FIELD": field, "MODEL": model_path, "EXTENT": MEUSE_GRID_EXTENT,
                         "PIXEL_SIZE": MEUSE_CELL, "MAP_AREA": "extent", "OUTPUT": raster_path, **extra})
    assert run.returncode == 0, run.messages


def read_raster(path: Path) -> tuple[np.ndarray, tuple, str]:
    """Band 1 with nodata as NaN, the geotransform, and the EPSG code of the CRS."""
    dataset = gdal.Open(str(path))
    band = dataset.GetRasterBand(1)
    values = band.ReadAsArray().astype(float)
    if band.GetNoDataValue() is not None:
        values[values == band.GetNoDataValue()] = np.nan
    srs = osr.SpatialReference(wkt=dataset.GetProjection())
    srs.AutoIdentifyEPSG()
    return values, dataset.GetGeoTransform(), srs.GetAuthorityCode(None)


def check_meuse_grid(path: Path) -> np.ndarray:
    """Assert the raster is in EPSG:28992 on 40 m cells over the Meuse grid extent; return its values."""
    values, transform, epsg = read_raster(path)
    assert epsg == "28992"
    assert transform[1] == pytest.approx(MEUSE_CELL) and transform[5] == pytest.approx(-MEUSE_CELL)
    assert (transform[0], transform[3]) == pytest.approx((178440.0, 333760.0))
    assert values.shape == (104, 78)  # (333760 - 329600) / 40 rows, (181560 - 178440) / 40 columns
    return values


def meuse_grid_cells() -> tuple[np.ndarray, np.ndarray]:
    """Row and column indices of the published 40 m Meuse grid cells in the rasters of :func:`predict`."""
    x, y = load_meuse_grid().xy.T
    rows = np.round((333760.0 - y) / MEUSE_CELL - 0.5).astype(int)
    cols = np.round((x - 178440.0) / MEUSE_CELL - 0.5).astype(int)
    return rows, cols


def test_fit_predict_crossvalidate_meuse_zinc(profile, meuse_layer, meuse, tmp_path):
    model_path = tmp_path / "zinc.json"
    document = fit(profile, meuse_layer, "zinc", model_path)
    assert document["field"] == "zinc" and document["transform"]["kind"] == "log"
    assert document["structures"][0]["family"] == "spherical"

    prediction, variance = tmp_path / "zinc.tif", tmp_path / "zinc_variance.tif"
    sd, upper = tmp_path / "zinc_sd.tif", tmp_path / "zinc_upper.tif"
    predict(profile, meuse_layer, "zinc", model_path, prediction, OUTPUT_VARIANCE=variance, OUTPUT_SD=sd,
            OUTPUT_UPPER=upper)
    estimate = check_meuse_grid(prediction)
    spread = check_meuse_grid(variance)
    np.testing.assert_allclose(check_meuse_grid(sd) ** 2, spread, rtol=1e-5)  # the standard error is sqrt(variance)
    assert (check_meuse_grid(upper) > estimate).all()  # the 95 % quantile lies above the median
    assert not (tmp_path / "zinc_lower.tif").exists()
    assert np.isfinite(estimate).all() and np.isfinite(spread).all()
    # Meuse zinc ranges from 113 to 1839 ppm (tests/data/meuse.csv). On the published grid cells (the flood
    # plain the samples cover) a median back-transformed kriging estimate of ln(zinc) stays near that range;
    # the bounding-box corners, up to 2 km from any sample, are extrapolations and are not checked here.
    on_grid = estimate[meuse_grid_cells()]
    assert 50.0 < on_grid.min() and on_grid.max() < 2500.0
    assert (spread >= 0).all()

    table = tmp_path / "crossvalidation.gpkg"
    run = run_algorithm(profile, "fieldcast:crossvalidate",
                        {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_path, "OUTPUT": table})
    assert run.returncode == 0, run.messages
    summary = run.results
    assert set(summary) >= {"ME", "RMSE", "MSDR", "COVERAGE95"}
    dataset = ogr.Open(str(table))
    assert dataset.GetLayer().GetFeatureCount() == 155  # one leave-one-out prediction per Meuse sample
    definition = dataset.GetLayer().GetLayerDefn()
    names = [definition.GetFieldDefn(i).GetName() for i in range(definition.GetFieldCount())]
    assert names[:2] == ["id", "zinc"] and "landuse" in names and "cv_z_score" in names  # the input's fields first
    ids = sorted(feature.GetField("id") for feature in dataset.GetLayer())
    assert ids == sorted(int(i) for i in meuse.ids)
    # Typical leave-one-out error of a Meuse zinc map: a few hundred ppm (from memory; values 113-1839 ppm).
    assert 100.0 < summary["RMSE_ATTRIBUTE"] < 500.0
    # Leave-one-out RMSE for ln(zinc) on Meuse is about 0.4 with a fitted spherical model (from memory);
    # the bounds leave room for the fit and still catch a broken pipeline.
    assert 0.2 < summary["RMSE"] < 0.6
    # A right model has MSDR and 95 % coverage inside their 99.9 % chi-square and binomial intervals for 155 errors
    # (tests/reference.py: calibrated_msdr_range, calibrated_coverage_range).
    low, high = calibrated_msdr_range(155)
    assert low < summary["MSDR"] < high
    low, high = calibrated_coverage_range(155)
    assert low <= summary["COVERAGE95"] <= high


def test_graphical_model_chains_fit_into_predict(profile, meuse_layer, tmp_path, fieldcast_plugin):  # noqa: F811
    model_file = tmp_path / "fit_then_predict.model3"
    write_fit_then_predict_model(model_file, {"FIELD": "zinc", **FIT_SETTINGS},
                                 {"FIELD": "zinc", "EXTENT": MEUSE_GRID_EXTENT, "PIXEL_SIZE": MEUSE_CELL})
    raster = tmp_path / "model_surface.tif"
    run = run_algorithm(profile, model_file, {"samples": meuse_layer, "predict:surface": raster})
    assert run.returncode == 0, run.messages
    check_meuse_grid(raster)
    # Predict used the fit's model file: it says it read one and did not fit the defaults itself, and the
    # model stored in the raster is the one FIT_SETTINGS asked for (the defaults have no transform).
    assert "Model read from" in run.messages
    assert "No model file given" not in run.messages
    stored = json.loads(gdal.Open(str(raster)).GetMetadataItem("fieldcast_model"))
    assert stored["transform"]["kind"] == "log"
    assert [structure["family"] for structure in stored["structures"]] == ["spherical"]


def test_three_fields_in_sequence_like_batch_mode(profile, meuse_layer, tmp_path):
    surfaces = {}
    for field in MEUSE_METALS:
        model_path = tmp_path / f"{field}.json"
        assert fit(profile, meuse_layer, field, model_path)["field"] == field
        predict(profile, meuse_layer, field, model_path, tmp_path / f"{field}.tif")
        surfaces[field] = check_meuse_grid(tmp_path / f"{field}.tif")
    # Each field gets its own surface: medians differ as the field medians do in meuse.csv
    # (zinc 326, copper 31, lead 123 ppm).
    medians = {field: float(np.median(values)) for field, values in surfaces.items()}
    assert medians["copper"] < medians["lead"] < medians["zinc"]


def test_text_field_fails_cleanly(profile, meuse_layer, tmp_path):
    model_path = tmp_path / "landuse.json"
    run = run_algorithm(profile, "fieldcast:fitmodel",
                        {"INPUT": meuse_layer, "FIELD": "landuse", **FIT_SETTINGS, "OUTPUT_MODEL": model_path})
    assert run.returncode != 0
    assert "landuse" in run.messages and "numeric field" in run.messages
    assert not model_path.exists()
    assert list(tmp_path.iterdir()) == []


def test_run_without_value_field_names_the_parameter(profile, meuse_layer, tmp_path):
    model_path = tmp_path / "model.json"
    run = run_algorithm(profile, "fieldcast:fitmodel", {"INPUT": meuse_layer, **FIT_SETTINGS,
                                                        "OUTPUT_MODEL": model_path})
    assert run.returncode != 0
    # qgis_process refuses a mandatory parameter left out before the algorithm runs, naming it.
    assert "mandatory parameters were not specified" in run.messages and "FIELD:\tValue field" in run.messages


@pytest.mark.parametrize(("algorithm", "parameters", "fragments"), [
    ("fieldcast:fitmodel", {"FIELD": "zinc", "KERNEL": "foo"},
     ("KERNEL (Covariance family) must be one of auto, exponential", "got 'foo'")),
    ("fieldcast:predict", {"FIELD": "zinc", "PIXEL_SIZE": -1},
     ("PIXEL_SIZE) must be a positive distance", "got '-1'")),
    ("fieldcast:simulate", {"FIELD": "zinc", "PIXEL_SIZE": 200, "REALIZATIONS": 4294967298},
     ("REALIZATIONS (number of realisations) must be a whole number from 1 to 65,535; got '4294967298'",)),
])
def test_bad_values_on_the_command_line_get_our_message(profile, meuse_layer, tmp_path, algorithm, parameters,
                                                        fragments):
    # qgis_process passes every value as text; the refusal comes before any work and leaves no file.
    output = {"OUTPUT_MODEL": tmp_path / "out.json"} if algorithm == "fieldcast:fitmodel" else \
        {"OUTPUT": tmp_path / "out.tif"}
    run = run_algorithm(profile, algorithm, {"INPUT": meuse_layer, **parameters, **output})
    assert run.returncode != 0
    for fragment in fragments:
        assert fragment in run.messages
    assert "Traceback" not in run.messages
    assert list(tmp_path.iterdir()) == []


def test_predictpoints_at_the_samples_is_the_kriging_of_the_model(profile, meuse_layer, meuse, tmp_path):
    model_path = tmp_path / "zinc.json"
    fit(profile, meuse_layer, "zinc", model_path)
    points = tmp_path / "at_samples.gpkg"
    run = run_algorithm(profile, "fieldcast:predictpoints", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_path,
                                                             "TARGETS": meuse_layer, "OUTPUT": points})
    assert run.returncode == 0, run.messages
    dataset = ogr.Open(str(points))  # held while the layer is read (a layer outliving its dataset crashes)
    layer = dataset.GetLayer()
    definition = layer.GetLayerDefn()
    names = [definition.GetFieldDefn(i).GetName() for i in range(definition.GetFieldCount())]
    assert names[:2] == ["id", "zinc"] and names[-3:] == ["zinc_est", "zinc_var", "zinc_sd"]
    rows = {int(feature.GetField("id")): (feature.GetField("zinc_est"), feature.GetField("zinc_sd"))
            for feature in layer}
    document = ModelDocument.load(str(model_path))
    offset = document.transform.offset
    mu, s2 = KrigingPredictor(meuse.xy, np.log(meuse.zinc + offset), document.covariance,
                              document.mean).predict(meuse.xy)
    # The median of the lognormal exp(Y), Y ~ N(mu, s2), is exp(mu); its sd exp(mu + s2/2) sqrt(exp(s2) - 1)
    # (Aitchison & Brown 1957, the lognormal distribution).
    got = np.array([rows[int(sample)] for sample in meuse.ids])
    np.testing.assert_allclose(got[:, 0], np.exp(mu) - offset, rtol=1e-9)
    np.testing.assert_allclose(got[:, 1], np.exp(mu + s2 / 2) * np.sqrt(np.expm1(s2)), rtol=1e-9)


def test_normal_score_model_through_qgis_process(profile, meuse_layer, meuse, tmp_path):
    model_path = tmp_path / "zinc_scores.json"
    run = run_algorithm(profile, "fieldcast:fitmodel", {"INPUT": meuse_layer, "FIELD": "zinc", **FIT_SETTINGS,
                                                        "TRANSFORM": "normalscore", "OUTPUT_MODEL": model_path})
    assert run.returncode == 0, run.messages
    points = tmp_path / "scores_at_samples.gpkg"
    run = run_algorithm(profile, "fieldcast:predictpoints", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_path,
                                                             "TARGETS": meuse_layer, "OUTPUT": points})
    assert run.returncode == 0, run.messages
    dataset = ogr.Open(str(points))
    rows = {int(feature.GetField("id")): feature.GetField("zinc_est") for feature in dataset.GetLayer()}
    document = ModelDocument.load(str(model_path))
    assert document.transform.kind == "normalscore"
    mu, _ = KrigingPredictor(meuse.xy, document.transform.forward(meuse.zinc), document.covariance,
                             document.mean).predict(meuse.xy)
    # The median of the back-transformed Gaussian is the inverse transform of the kriging mean (monotone).
    got = np.array([rows[int(sample)] for sample in meuse.ids])
    np.testing.assert_allclose(got, document.transform.back_median(mu), rtol=1e-9)


def changed_model(folder: Path, name: str, document: dict, change) -> str:
    """``document`` after ``change(copy)`` written to ``folder/name.json`` (NaN as JSON's literal NaN); its path."""
    copy = json.loads(json.dumps(document))
    change(copy)
    path = folder / f"{name}.json"
    path.write_text(json.dumps(copy), encoding="utf-8")
    return str(path)


def derived_layer(source: str, path: Path, sql: str) -> str:
    """The result of ``sql`` on the Meuse GeoPackage ``source`` written as the layer ``meuse`` of ``path``."""
    gdal.VectorTranslate(str(path), source.split("|")[0], SQLStatement=sql, layerName="meuse")
    return f"{path}|layername=meuse"


def polygon_geopackage(path: Path, wkts: list[str], epsg: int | None = 28992) -> str:
    """A GeoPackage polygon layer ``site`` holding ``wkts`` (``epsg=None``: no spatial reference); its OGR URI."""
    srs = None
    if epsg is not None:
        srs = osr.SpatialReference()
        srs.ImportFromEPSG(epsg)
    source = ogr.GetDriverByName("GPKG").CreateDataSource(str(path))
    table = source.CreateLayer("site", srs, ogr.wkbPolygon)
    for wkt in wkts:
        feature = ogr.Feature(table.GetLayerDefn())
        feature.SetGeometry(ogr.CreateGeometryFromWkt(wkt))
        table.CreateFeature(feature)
    source = None
    return f"{path}|layername=site"


# A square over the Meuse samples (they span x 178605-181390, y 329714-333611 m, tests/data/meuse.csv).
MEUSE_SQUARE = "POLYGON((178000 329000, 182000 329000, 182000 334000, 178000 334000, 178000 329000))"


@pytest.fixture(scope="module")
def refusal_inputs(profile, meuse_layer, tmp_path_factory) -> dict[str, str]:
    """Input files of the refusal runs and of the odd inputs that must run: the Meuse GeoPackage, a zinc model and
    copies broken as the campaign broke them, the model saved with a BOM and CRLF line ends, Meuse zinc times 1e297,
    the first four Meuse samples, masks (over the samples, without CRS, empty), a GeoPackage whose layer GDAL wrote
    without a spatial reference (a site grid in metres), and a read-only file."""
    folder = tmp_path_factory.mktemp("refusal-inputs")
    model = folder / "zinc.json"
    document = fit(profile, meuse_layer, "zinc", model)
    bom_model = folder / "windows.json"
    bom_model.write_bytes(b"\xef\xbb\xbf" + json.dumps(document, indent=1).replace("\n", "\r\n").encode("utf-8"))
    read_only = folder / "kept.tif"
    read_only.write_text("kept on purpose", encoding="utf-8")
    read_only.chmod(0o444)
    first = document["structures"][0]
    return {
        "samples": meuse_layer, "model": str(model), "bom_model": str(bom_model),
        "bad_model": changed_model(folder, "bad", document, lambda d: d.update(format_version="abc")),
        "nan_azimuth": changed_model(folder, "nan_azimuth", document,
                                     lambda d: d["structures"][0].update(azimuth=float("nan"))),
        "huge_sill": changed_model(folder, "huge_sill", document,
                                   lambda d: d["structures"][0].update(partial_sill=1e300)),
        "text_transform": changed_model(folder, "text_transform", document, lambda d: d.update(transform="log")),
        "text_fit": changed_model(folder, "text_fit", document, lambda d: d.update(fit="reml")),
        "nan_known_mean": changed_model(folder, "nan_known_mean", document, lambda d: d["mean"].update(
            kind="known", known_value=float("nan"), coefficients=[])),
        # A partial sill of 1e50 (accepted: at most 1e100) puts every kriging variance beyond Float32 (about
        # 3.4e38, IEEE 754 single precision); 1e39 ppm^2 (no transform) with an exponential 20 m range and no
        # nugget does so away from the samples.
        "float32_sill": changed_model(folder, "float32_sill", document,
                                      lambda d: d["structures"][0].update(partial_sill=1e50)),
        "steep_model": changed_model(folder, "steep", document,
                                     lambda d: d.update(nugget=0.0, transform={"kind": "none", "offset": 0.0},
                                                        structures=[{**first, "family": "exponential",
                                                                     "partial_sill": 1e39, "range": 20.0}])),
        "huge_values": derived_layer(meuse_layer, folder / "huge.gpkg",
                                     "SELECT geom, zinc * 1e297 AS zinc FROM meuse"),
        "four_samples": derived_layer(meuse_layer, folder / "four.gpkg", "SELECT * FROM meuse ORDER BY id LIMIT 4"),
        "mask": polygon_geopackage(folder / "mask.gpkg", [MEUSE_SQUARE]),
        "mask_no_srs": polygon_geopackage(folder / "mask_no_srs.gpkg", [MEUSE_SQUARE], epsg=None),
        "empty_mask": polygon_geopackage(folder / "empty_mask.gpkg", []),
        "no_srs": write_geopackage_without_srs(folder / "site.gpkg"),
        "read_only": str(read_only)}


def file_digests(inputs: dict[str, str]) -> dict[str, str]:
    """SHA-256 of the bytes of every input file (an OGR URI stands for its file)."""
    return {name: hashlib.sha256(Path(uri.split("|")[0]).read_bytes()).hexdigest() for name, uri in inputs.items()}


def broken_model(algorithm: str, model: str, *fragments: str) -> tuple[str, dict, tuple[str, ...]]:
    """A case of :data:`REFUSALS`: ``algorithm`` (predict or crossvalidate) on the Meuse zinc samples with the
    broken model file ``model`` of refusal_inputs, refused with ``fragments`` and the advice to refit."""
    output = "{out}/cv.gpkg" if algorithm == "fieldcast:crossvalidate" else "{out}/zinc.tif"
    grid = {"PIXEL_SIZE": 400} if algorithm == "fieldcast:predict" else {}
    return (algorithm, {"INPUT": "{samples}", "FIELD": "zinc", "MODEL": f"{{{model}}}", **grid, "OUTPUT": output},
            (*fragments, "Refit the model with 'Fit covariance model'"))


# Each case: algorithm, parameters ({name} = an input of refusal_inputs, {out} = the empty output folder), and
# the fragments of the refusal that name the cause and the way out.
REFUSALS = [
    ("fieldcast:fitmodel", {"INPUT": "{samples}", "FIELD": "zinc", **FIT_SETTINGS, "OUTPUT_MODEL": "{samples_file}"},
     ("OUTPUT_MODEL would overwrite the input file", "(INPUT)", "Choose another file name")),
    ("fieldcast:predict", {"INPUT": "{samples}", "FIELD": "zinc", "MODEL": "{model}", "PIXEL_SIZE": 400,
                           "OUTPUT": "{out}/zinc.tif", "OUTPUT_VARIANCE": "{out}/zinc.tif"},
     ("OUTPUT and OUTPUT_VARIANCE are the same file", "give each output its own file name")),
    ("fieldcast:predict", {"INPUT": "{samples}", "FIELD": "zinc", "MODEL": "{bad_model}", "PIXEL_SIZE": 400,
                           "OUTPUT": "{out}/zinc.tif"},
     ("format_version", '"abc"', "a whole number of 1 or more", "Refit the model with 'Fit covariance model'")),
    ("fieldcast:predict", {"INPUT": "{samples}", "FIELD": "zinc", "MODEL": "{model}", "PIXEL_SIZE": 400,
                           "THRESHOLD": 500, "OUTPUT": "{out}/zinc.tif"},
     ("no exceedance raster is asked for", "OUTPUT_EXCEEDANCE", "leave 'Threshold' (THRESHOLD) empty")),
    ("fieldcast:predict", {"INPUT": "{samples}", "FIELD": "zinc", "MODEL": "{model}",
                           "EXTENT": "-8000000,9500000,-8000000,9500000 [EPSG:28992]", "OUTPUT": "{out}/zinc.tif"},
     ("Choose an extent at most 10 times the samples'", "leave EXTENT empty")),
    ("fieldcast:simulate", {"INPUT": "{samples}", "FIELD": "zinc", "MODEL": "{model}", "PIXEL_SIZE": 400,
                            "REALIZATIONS": 2, "SEED": -1, "OUTPUT": "{out}/sims.tif"},
     ("SEED (random seed) must be a whole number of 0 or more; got '-1'",)),
    ("fieldcast:fitmodel", {"INPUT": "{no_srs}", "FIELD": "depth", "OUTPUT_MODEL": "{out}/site.json"},
     ("The layer site has no defined CRS", "local engineering CRS")),
    broken_model("fieldcast:predict", "nan_azimuth", "structures[0].azimuth = nan", "a finite number of degrees"),
    broken_model("fieldcast:crossvalidate", "huge_sill", "structures[0].partial_sill = 1e+300", "at most 1e+100"),
    broken_model("fieldcast:predict", "text_transform", 'transform = "log"', "an object ({...})"),
    broken_model("fieldcast:crossvalidate", "text_fit", 'fit = "reml"', "an object ({...})"),
    broken_model("fieldcast:predict", "nan_known_mean", "mean.known_value = nan", "a finite number"),
    ("fieldcast:predict", {"INPUT": "{samples}", "FIELD": "zinc", "MODEL": "{float32_sill}", "PIXEL_SIZE": 400,
                           "OUTPUT": "{out}/zinc.tif", "OUTPUT_VARIANCE": "{out}/variance.tif"},
     ("The zinc variance raster(s) would be nodata at every cell", "Check the model's sill and partial sills")),
    ("fieldcast:fitmodel", {"INPUT": "{huge_values}", "FIELD": "zinc", **FIT_SETTINGS, "TRANSFORM": "none",
                            "OUTPUT_MODEL": "{out}/huge.json"},
     ("155 sample value(s) are beyond \u00b11e+50", "Rescale the field to larger units")),
    ("fieldcast:simulate", {"INPUT": "{samples}", "FIELD": "zinc", "MODEL": "{model}", "PIXEL_SIZE": 400,
                            "REALIZATIONS": 65536, "OUTPUT": "{out}/sims.tif"},
     ("must be a whole number from 1 to 65,535; got '65536'", "Set REALIZATIONS")),
    ("fieldcast:predict", {"INPUT": "{samples}", "FIELD": "zinc", "MODEL": "{model}", "PIXEL_SIZE": 400,
                           "MASK": "{mask_no_srs}", "OUTPUT": "{out}/zinc.tif"},
     ("(MASK) has no defined CRS", "Assign its real CRS")),
    ("fieldcast:predict", {"INPUT": "{samples}", "FIELD": "zinc", "MODEL": "{model}", "PIXEL_SIZE": 400,
                           "MASK": "{empty_mask}", "OUTPUT": "{out}/zinc.tif"},
     ("(MASK) holds no polygons", "leave MASK empty")),
    ("fieldcast:simulate", {"INPUT": "{samples}", "FIELD": "zinc", "MODEL": "{model}", "PIXEL_SIZE": 400,
                            "MASK": "{mask}", "REALIZATIONS": 2, "OUTPUT": "{out}/sims.tif",
                            "OUTPUT_TABLE": "{mask_file}"},
     ("OUTPUT_TABLE would overwrite the input file", "(MASK)", "Choose another file name")),
    ("fieldcast:predict", {"INPUT": "{samples}", "FIELD": "zinc", "MODEL": "{model}", "PIXEL_SIZE": 400,
                           "OUTPUT": "{read_only}"},
     ("(OUTPUT) exists and is read-only, so it is not replaced", "Make the file writable")),
    ("fieldcast:fitmodel", {"INPUT": "{samples}", "FIELD": "zinc", **FIT_SETTINGS, "TRANSFORM": "boxcox",
                            "BOXCOX_LAMBDA": 9, "OUTPUT_MODEL": "{out}/zinc.json"},
     ("The Box-Cox lambda (BOXCOX_LAMBDA) must lie between -5 and 5", "Leave it empty to estimate it")),
]


@pytest.mark.parametrize(("algorithm", "parameters", "fragments"), REFUSALS,
                         ids=["output-on-input", "two-outputs-one-file", "bad-model-file", "threshold-unused",
                              "extent-too-wide", "negative-seed", "geopackage-without-crs", "nan-azimuth",
                              "huge-partial-sill", "transform-as-text", "fit-as-text", "nan-known-mean",
                              "variance-beyond-float32", "values-near-1e300", "realisations-beyond-geotiff-bands",
                              "mask-without-crs", "empty-mask", "output-on-mask", "read-only-output",
                              "boxcox-lambda-out-of-range"])
def test_refusals_through_qgis_process_name_cause_and_way_out_and_touch_nothing(profile, refusal_inputs, tmp_path,
                                                                               algorithm, parameters, fragments):
    out = tmp_path / "out"
    out.mkdir()
    names = {**refusal_inputs, "samples_file": refusal_inputs["samples"].split("|")[0],
             "mask_file": refusal_inputs["mask"].split("|")[0], "out": str(out)}
    before = file_digests(refusal_inputs)
    run = run_algorithm(profile, algorithm, {key: str(value).format(**names) for key, value in parameters.items()})
    assert run.returncode != 0
    for fragment in fragments:
        assert fragment in run.messages
    assert "Traceback" not in run.messages
    assert list(out.iterdir()) == []
    assert file_digests(refusal_inputs) == before
    assert Path(refusal_inputs["read_only"]).stat().st_mode & 0o777 == 0o444


# Each case: algorithm, parameters (as for REFUSALS), the fragments the log must hold, and the files the run writes.
ODD_INPUTS_THAT_RUN = [
    ("fieldcast:predict", {"INPUT": "{samples}", "FIELD": "zinc", "MODEL": "{bom_model}", "PIXEL_SIZE": 400,
                           "OUTPUT": "{out}/zinc.tif"},
     ("Model read from",), ("zinc.tif",)),
    ("fieldcast:fitmodel", {"INPUT": "{four_samples}", "FIELD": "zinc", "OUTPUT_MODEL": "{out}/four.json",
                            "OUTPUT_REPORT": "{out}/four.html"},
     ("Only 4 samples", "rule of thumb"), ("four.html", "four.json")),
    ("fieldcast:predict", {"INPUT": "{samples}", "FIELD": "zinc", "MODEL": "{steep_model}", "PIXEL_SIZE": 100,
                           "OUTPUT": "{out}/zinc.tif", "OUTPUT_VARIANCE": "{out}/variance.tif"},
     ("The zinc variance raster is nodata at",), ("variance.tif", "zinc.tif")),
    # EPSG:32633 (WGS 84 / UTM zone 33N) is defined from 12 to 18 degrees east (EPSG registry); Meuse lies near 5.7.
    ("fieldcast:fitmodel", {"INPUT": "{samples}", "FIELD": "zinc", **FIT_SETTINGS, "TARGET_CRS": "EPSG:32633",
                            "OUTPUT_MODEL": "{out}/utm33.json"},
     ("155 of 155 samples lie outside the area of use",), ("utm33.json",)),
]


@pytest.mark.parametrize(("algorithm", "parameters", "fragments", "written"), ODD_INPUTS_THAT_RUN,
                         ids=["model-with-bom-and-crlf", "four-samples-with-report", "variance-mostly-nodata",
                              "outside-the-crs-area-of-use"])
def test_odd_inputs_through_qgis_process_run_and_say_what_is_odd(profile, refusal_inputs, tmp_path, algorithm,
                                                                 parameters, fragments, written):
    # Each used to be refused (a model file as Windows editors save it), crash (the report of 3-5 samples) or
    # pass in silence (a variance raster mostly nodata, samples outside the working CRS's area of use).
    names = {**refusal_inputs, "out": str(tmp_path)}
    run = run_algorithm(profile, algorithm, {key: str(value).format(**names) for key, value in parameters.items()})
    assert run.returncode == 0, run.messages
    for fragment in fragments:
        assert fragment in run.messages
    assert "Traceback" not in run.messages
    assert sorted(path.name for path in tmp_path.iterdir()) == sorted(written)


def test_seeds_from_two_to_the_31_on_the_command_line_are_taken_whole(profile, refusal_inputs, tmp_path):
    # 2**31 and 2**32 + 2 used to become seed 0 (byte-identical realisations); numpy's default_rng takes any
    # non-negative integer, so the two seeds give different fields.
    fields = []
    for seed in (2**31, 2**32 + 2):
        path = tmp_path / f"seed_{seed}.tif"
        run = run_algorithm(profile, "fieldcast:simulate", {
            "INPUT": refusal_inputs["samples"], "FIELD": "zinc", "MODEL": refusal_inputs["model"], "PIXEL_SIZE": 400,
            "REALIZATIONS": 1, "SEED": seed, "OUTPUT": path})
        assert run.returncode == 0, run.messages
        assert f"(seed {seed})" in run.messages
        fields.append(read_raster(path)[0])
    assert not np.array_equal(fields[0], fields[1], equal_nan=True)


def test_predict_on_a_template_raster_takes_its_grid_and_nodata(profile, meuse_layer, meuse, tmp_path):
    model_path = tmp_path / "zinc.json"
    fit(profile, meuse_layer, "zinc", model_path)
    template = write_template(tmp_path / "template.tif")  # origin off the 40 m multiples, nodata top-left block
    raster = tmp_path / "on_template.tif"
    run = run_algorithm(profile, "fieldcast:predict", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_path,
                                                       "TEMPLATE": template, "MAP_AREA": "extent",
                                                       "OUTPUT": raster})
    assert run.returncode == 0, run.messages
    values, transform, epsg = read_raster(raster)
    assert transform == MEUSE_TEMPLATE and epsg == "28992" and values.shape == (ROWS, COLUMNS)
    inside = np.ones((ROWS, COLUMNS), dtype=bool)
    inside[:10, :20] = False
    assert np.isnan(values[~inside]).all()  # TEMPLATE_NODATA_MASK is on by default
    document = ModelDocument.load(str(model_path))
    offset = document.transform.offset
    mu, _ = KrigingPredictor(meuse.xy, np.log(meuse.zinc + offset), document.covariance,
                             document.mean).predict(template_centres(template))
    # The median of the lognormal exp(Y), Y ~ N(mu, s2), is exp(mu) (Aitchison & Brown 1957); Float32 storage.
    np.testing.assert_allclose(values[inside], (np.exp(mu) - offset).reshape(ROWS, COLUMNS)[inside], rtol=1e-5)


def test_qgis_process_fits_and_predicts_points_with_covariate_rasters(profile, meuse_layer, meuse, tmp_path):
    # Covariates given as raster files on the command line (one NAME=path pair per raster) are named by their
    # file names; the points are kriged with the covariates read at them (the published Meuse samples' places).
    dist, ffreq = write_meuse_covariates(tmp_path)
    model_path = tmp_path / "zinc.json"
    rasters = {"COVARIATES": [str(dist)], "CLASS_COVARIATES": [str(ffreq)]}
    run = run_algorithm(profile, "fieldcast:fitmodel", {"INPUT": meuse_layer, "FIELD": "zinc", **FIT_SETTINGS,
                                                        **rasters, "OUTPUT_MODEL": model_path})
    assert run.returncode == 0, run.messages
    document = ModelDocument.load(str(model_path))
    assert document.covariates.column_names == ("dist", "ffreq=2", "ffreq=3")
    points = tmp_path / "points.gpkg"
    run = run_algorithm(profile, "fieldcast:predictpoints", {"INPUT": meuse_layer, "FIELD": "zinc", "MODEL": model_path,
                                                             **rasters, "TARGETS": meuse_layer, "OUTPUT": points})
    assert run.returncode == 0, run.messages
    dataset = ogr.Open(str(points))
    rows = {int(feature.GetField("id")): feature.GetField("zinc_est") for feature in dataset.GetLayer()}
    sources = [CovariateSource("dist", str(dist)), CovariateSource("ffreq", str(ffreq), "class")]
    read = SampleCovariates.read(sources, meuse.xy, to_wkt2("EPSG:28992"))
    mu, _ = KrigingPredictor(meuse.xy[read.kept], np.log(meuse.zinc[read.kept]), document.covariance,
                             document.mean, read.columns).predict(meuse.xy[read.kept], read.columns)
    got = np.array([rows[int(sample)] for sample in meuse.ids[read.kept]], dtype=float)
    np.testing.assert_allclose(got, np.exp(mu), rtol=1e-9)
    assert all(rows[int(sample)] is None for sample in meuse.ids[~read.kept])
