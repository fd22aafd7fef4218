"""'Predict surfaces for several fields' (fieldcast:predictmany) against separate fitmodel + predict runs.

Data: the published Meuse topsoil samples (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp package;
tests/data/README.md), EPSG:28992 metres: zinc, copper and lead in ppm, log transform. The lead column is
given NULLs at a few samples here (not in the data set) so that the fields' sample sets differ.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from osgeo import gdal, ogr, osr
from qgis.core import (
    QgsField,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsProcessingModelAlgorithm,
    QgsProcessingModelChildAlgorithm,
    QgsProcessingModelChildParameterSource,
    QgsProcessingModelOutput,
    QgsProcessingModelParameter,
    QgsProcessingParameterFeatureSource,
)

from qgis_process_support import QGIS_PROCESS, make_profile, run_qgis_process
from qgis_support import CancelAfterFirstProgress, field_type, fieldcast_plugin, point_layer, qgis_processing  # noqa: F401

FIT = {"TRANSFORM": "log", "KERNEL": "spherical", "ANISOTROPY": False, "TREND": "constant", "METHOD": "reml"}
GRID = {"EXTENT": "178440,181560,329600,333760 [EPSG:28992]", "PIXEL_SIZE": 80.0}
LEAD = "Pb (ppm)"  # a field name that is not a safe file name
LEAD_STEM = "Pb__ppm_"
MISSING_LEAD = np.arange(0, 155, 10)  # samples whose lead is NULL in this test


def read_band(path: Path) -> np.ndarray:
    """Band 1 as stored (Float32, nodata -9999)."""
    dataset = gdal.Open(str(path))
    return dataset.GetRasterBand(1).ReadAsArray()


@pytest.fixture(scope="module")
def layer(meuse):
    lead = np.array(meuse.lead, dtype=float)
    lead[MISSING_LEAD] = np.nan
    return point_layer(meuse.xy, {"zinc": meuse.zinc, "copper": meuse.copper, LEAD: lead})


@pytest.fixture(scope="module")
def runs(qgis_processing, layer, tmp_path_factory):  # noqa: F811
    """One predictmany run over the three fields, and one fitmodel + predict run per field, with the same settings."""
    folder = tmp_path_factory.mktemp("predictmany")
    feedback = QgsProcessingFeedback()
    many = qgis_processing.run("fieldcast:predictmany", {
        "INPUT": layer, "FIELDS": ["zinc", "copper", LEAD], **FIT, **GRID, "OUTPUT_FOLDER": str(folder / "many")},
        feedback=feedback)
    single = folder / "single"
    single.mkdir()
    for field, stem in (("zinc", "zinc"), ("copper", "copper"), (LEAD, LEAD_STEM)):
        fit = qgis_processing.run("fieldcast:fitmodel", {"INPUT": layer, "FIELD": field, **FIT,
                                                         "OUTPUT_MODEL": str(single / f"{stem}_model.json")})
        qgis_processing.run("fieldcast:predict", {
            "INPUT": layer, "FIELD": field, "MODEL": fit["OUTPUT_MODEL"], **GRID,
            "OUTPUT": str(single / f"{stem}_prediction.tif"), "OUTPUT_VARIANCE": str(single / f"{stem}_variance.tif")})
    return many, feedback.textLog(), folder / "many", single


def test_three_fields_give_the_rasters_of_separate_runs(runs):
    results, _, many, single = runs
    assert results == {"OUTPUT_FOLDER": str(many), "COUNT": 3}
    names = sorted(f"{stem}_{kind}" for stem in ("zinc", "copper", LEAD_STEM)
                   for kind in ("model.json", "prediction.tif", "variance.tif"))
    assert sorted(path.name for path in many.iterdir()) == names
    for stem in ("zinc", "copper", LEAD_STEM):
        assert (many / f"{stem}_model.json").read_text() == (single / f"{stem}_model.json").read_text()
        for kind in ("prediction", "variance"):
            ours, theirs = read_band(many / f"{stem}_{kind}.tif"), read_band(single / f"{stem}_{kind}.tif")
            np.testing.assert_allclose(ours, theirs, rtol=2e-7)  # float32 round-off at most


def test_fields_at_the_same_locations_share_the_grid_and_null_values_are_skipped_per_field(runs):
    _, log, _, _ = runs
    assert log.count("Same sample locations as an earlier field") == 1  # copper after zinc; not lead
    assert f"Skipped {len(MISSING_LEAD)} feature(s) whose {LEAD} is NULL" in log
    assert f"Using {155 - len(MISSING_LEAD)} samples of {LEAD}" in log and "Using 155 samples of copper" in log


def test_cancel_keeps_finished_fields_only(qgis_processing, layer, tmp_path):  # noqa: F811
    folder = tmp_path / "cancelled"
    with pytest.raises(QgsProcessingException, match="Cancelled at field copper: none of its files was written"):
        qgis_processing.run("fieldcast:predictmany", {
            "INPUT": layer, "FIELDS": ["zinc", "copper"], **FIT, **GRID, "OUTPUT_FOLDER": str(folder)},
            feedback=CancelAfterFirstProgress(start_percent=55.0))
    assert sorted(path.name for path in folder.iterdir()) == [
        "zinc_model.json", "zinc_prediction.tif", "zinc_variance.tif"]


def text_layer(meuse):
    samples = point_layer(meuse.xy, {"zinc": meuse.zinc})
    samples.dataProvider().addAttributes([QgsField("label", field_type("String"))])
    samples.updateFields()
    return samples


@pytest.mark.parametrize("case, message", [
    ("empty fields", "No value field chosen"),
    ("text field", "Field 'label' holds"),
    ("folder under a file", "Cannot create the output folder"),
    ("one neighbour", "Set NEIGHBOURS to 2 or more"),
])
def test_bad_inputs_are_refused_without_output(qgis_processing, meuse, tmp_path, case, message):  # noqa: F811
    (tmp_path / "a_file").write_text("not a folder")
    parameters = {"INPUT": text_layer(meuse), "FIELDS": ["zinc"], **FIT, **GRID,
                  "OUTPUT_FOLDER": str(tmp_path / "out")}
    parameters.update({"empty fields": {"FIELDS": []}, "text field": {"FIELDS": ["zinc", "label"]},
                       "folder under a file": {"OUTPUT_FOLDER": str(tmp_path / "a_file" / "out")},
                       "one neighbour": {"NEIGHBOURS": 1}}[case])
    with pytest.raises(QgsProcessingException, match=message):
        qgis_processing.run("fieldcast:predictmany", parameters)
    assert not (tmp_path / "out").exists() or not list((tmp_path / "out").iterdir())


def write_gpkg(path: Path, meuse) -> None:
    """The Meuse samples' zinc and copper as a GeoPackage layer ``meuse`` in EPSG:28992, for qgis_process."""
    srs = osr.SpatialReference()
    srs.ImportFromEPSG(28992)
    source = ogr.GetDriverByName("GPKG").CreateDataSource(str(path))
    layer = source.CreateLayer("meuse", srs, ogr.wkbPoint)
    for name in ("zinc", "copper"):
        layer.CreateField(ogr.FieldDefn(name, ogr.OFTReal))
    for (x, y), zinc, copper in zip(meuse.xy, meuse.zinc, meuse.copper):
        feature = ogr.Feature(layer.GetLayerDefn())
        feature.SetField("zinc", float(zinc))
        feature.SetField("copper", float(copper))
        point = ogr.Geometry(ogr.wkbPoint)
        point.AddPoint_2D(float(x), float(y))
        feature.SetGeometry(point)
        layer.CreateFeature(feature)
    source = None


@pytest.mark.skipif(QGIS_PROCESS is None, reason="qgis_process.bin is not installed")
def test_fields_are_repeated_on_the_qgis_process_command_line(meuse, tmp_path):
    path = tmp_path / "meuse.gpkg"
    write_gpkg(path, meuse)
    settings = [f"{name}={str(value).lower() if isinstance(value, bool) else value}" for name, value in FIT.items()]
    run = run_qgis_process(make_profile(tmp_path / "profile"), "run", "fieldcast:predictmany", "--",
                           f"INPUT={path}|layername=meuse", "FIELDS=zinc", "FIELDS=copper", *settings,
                           "PIXEL_SIZE=200", f"OUTPUT_FOLDER={tmp_path / 'out'}")
    assert run.returncode == 0, run.messages
    assert run.results["COUNT"] == 2
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == sorted(
        f"{field}_{kind}" for field in ("zinc", "copper") for kind in ("model.json", "prediction.tif", "variance.tif"))


def write_predictmany_model(path: Path, fixed: dict) -> None:
    """A graphical model (``.model3``) with one input ``samples`` and one step ``many`` (fieldcast:predictmany)
    whose OUTPUT_FOLDER is the model output ``folder``, set on the command line as ``many:folder=PATH``."""
    model = QgsProcessingModelAlgorithm("Several fields", "Fieldcast tests")
    model.addModelParameter(QgsProcessingParameterFeatureSource("samples", "Samples"),
                            QgsProcessingModelParameter("samples"))
    step = QgsProcessingModelChildAlgorithm("fieldcast:predictmany")
    step.setChildId("many")
    step.addParameterSources("INPUT", [QgsProcessingModelChildParameterSource.fromModelParameter("samples")])
    for name, value in fixed.items():  # one name at a time (see qgis_process_support.write_fit_then_predict_model)
        step.addParameterSources(name, [QgsProcessingModelChildParameterSource.fromStaticValue(value)])
    folder = QgsProcessingModelOutput("folder", "Folder")
    folder.setChildId("many")
    folder.setChildOutputName("OUTPUT_FOLDER")
    step.setModelOutputs({"folder": folder})
    model.addChildAlgorithm(step)
    assert model.toFile(str(path))


@pytest.mark.skipif(QGIS_PROCESS is None, reason="qgis_process.bin is not installed")
def test_predictmany_runs_in_a_graphical_model(fieldcast_plugin, meuse, tmp_path):  # noqa: F811
    samples = tmp_path / "meuse.gpkg"
    write_gpkg(samples, meuse)
    write_predictmany_model(tmp_path / "many.model3", {"FIELDS": ["zinc", "copper"], **FIT, "PIXEL_SIZE": 200.0})
    run = run_qgis_process(make_profile(tmp_path / "profile"), "run", str(tmp_path / "many.model3"), "--",
                           f"samples={samples}|layername=meuse", f"many:folder={tmp_path / 'out'}")
    assert run.returncode == 0, run.messages
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == sorted(
        f"{field}_{kind}" for field in ("zinc", "copper") for kind in ("model.json", "prediction.tif", "variance.tif"))
