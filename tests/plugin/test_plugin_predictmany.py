"""'Predict surfaces for several fields' (fieldcast:predictmany) against separate fitmodel + predict runs.

Data: the published Meuse topsoil samples (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp package;
tests/data/README.md), EPSG:28992 metres: zinc, copper and lead in ppm, log transform. The lead column is
given NULLs at a few samples here (not in the data set) so that the fields' sample sets differ.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from osgeo import gdal
from qgis.core import (
    QgsField,
    QgsProcessingException,
    QgsProcessingFeedback,
)

from qgis_process_support import (
    QGIS_PROCESS,
    make_profile,
    run_algorithm,
    run_qgis_process,
    write_graphical_model,
    write_meuse_geopackage,
)
from qgis_support import CancelAfterFirstProgress, field_type, fieldcast_plugin, point_layer, qgis_processing  # noqa: F401
from requirements_check import skip_unless_available

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
            "OUTPUT": str(single / f"{stem}_prediction.tif"), "OUTPUT_VARIANCE": str(single / f"{stem}_variance.tif"),
            "OUTPUT_SD": str(single / f"{stem}_sd.tif")})
    return many, feedback.textLog(), folder / "many", single


def test_three_fields_give_the_rasters_of_separate_runs(runs):
    results, _, many, single = runs
    assert results == {"OUTPUT_FOLDER": str(many), "COUNT": 3}
    names = sorted(f"{stem}_{kind}" for stem in ("zinc", "copper", LEAD_STEM)
                   for kind in ("model.json", "prediction.tif", "variance.tif", "sd.tif"))
    assert sorted(path.name for path in many.iterdir()) == names
    for stem in ("zinc", "copper", LEAD_STEM):
        assert (many / f"{stem}_model.json").read_text() == (single / f"{stem}_model.json").read_text()
        for kind in ("prediction", "variance", "sd"):
            ours, theirs = read_band(many / f"{stem}_{kind}.tif"), read_band(single / f"{stem}_{kind}.tif")
            np.testing.assert_allclose(ours, theirs, rtol=2e-7)  # float32 round-off at most


def test_fields_at_the_same_locations_share_the_grid_and_null_values_are_skipped_per_field(runs):
    _, log, _, _ = runs
    assert log.count("Same sample locations as an earlier field") == 1  # copper after zinc; not lead
    assert f"Skipped {len(MISSING_LEAD)} feature(s) whose {LEAD} is NULL" in log
    assert f"Using {155 - len(MISSING_LEAD)} samples of {LEAD}" in log and "Using 155 samples of copper" in log


def test_cancel_at_a_later_field_leaves_no_file(qgis_processing, layer, tmp_path):  # noqa: F811
    folder = tmp_path / "cancelled"
    with pytest.raises(QgsProcessingException, match="Cancelled at field copper: no file was written"):
        qgis_processing.run("fieldcast:predictmany", {
            "INPUT": layer, "FIELDS": ["zinc", "copper"], **FIT, **GRID, "OUTPUT_FOLDER": str(folder)},
            feedback=CancelAfterFirstProgress(start_percent=55.0))
    assert list(folder.iterdir()) == []


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


@skip_unless_available(QGIS_PROCESS is not None, "qgis_process.bin is not installed")
def test_fields_are_repeated_on_the_qgis_process_command_line(tmp_path):
    samples = write_meuse_geopackage(tmp_path / "meuse.gpkg")
    run = run_algorithm(make_profile(tmp_path / "profile"), "fieldcast:predictmany", {
        "INPUT": samples, "FIELDS": ["zinc", "copper"], **FIT, "PIXEL_SIZE": 200,
        "OUTPUT_FOLDER": tmp_path / "out"})
    assert run.returncode == 0, run.messages
    assert run.results["COUNT"] == 2
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == sorted(
        f"{field}_{kind}" for field in ("zinc", "copper")
        for kind in ("model.json", "prediction.tif", "variance.tif", "sd.tif"))


@skip_unless_available(QGIS_PROCESS is not None, "qgis_process.bin is not installed")
def test_predictmany_runs_in_a_graphical_model(fieldcast_plugin, tmp_path):  # noqa: F811
    samples = write_meuse_geopackage(tmp_path / "meuse.gpkg")
    write_graphical_model(tmp_path / "many.model3", "Several fields",
                          [("many", "fieldcast:predictmany", {"FIELDS": ["zinc", "copper"], **FIT, "PIXEL_SIZE": 200.0},
                            {})],
                          ("folder", "many", "OUTPUT_FOLDER"))
    run = run_qgis_process(make_profile(tmp_path / "profile"), "run", str(tmp_path / "many.model3"), "--",
                           f"samples={samples}", f"many:folder={tmp_path / 'out'}")
    assert run.returncode == 0, run.messages
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == sorted(
        f"{field}_{kind}" for field in ("zinc", "copper")
        for kind in ("model.json", "prediction.tif", "variance.tif", "sd.tif"))
