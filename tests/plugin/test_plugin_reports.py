"""The HTML reports written by 'Fit covariance model' and 'Cross-validate model' (OUTPUT_REPORT).

Data: the Meuse topsoil samples (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp package;
tests/data/README.md), EPSG:28992 metres, modelled as ln(zinc). The algorithms run in-process through
``processing.run`` with the plugin loaded by folder path (tests/qgis_support.py); the reports are read
through their ``fieldcast-data`` JSON block.
"""
from __future__ import annotations

import importlib
import math
from pathlib import Path

import numpy as np
import pytest
from qgis.core import QgsFeature, QgsProcessingException, QgsProcessingFeedback

from fieldcast.algorithms.io.model_file import ModelDocument
from qgis_support import (  # noqa: F401 - fieldcast_plugin and qgis_processing are fixtures
    PACKAGE_NAME,
    CancelAfterFirstProgress,
    fieldcast_plugin,
    point_layer,
    qgis_processing,
)
from test_report_fit import embedded_data

# "auto" without anisotropy compares the five closed-form families by AIC (README) and stays quick.
AUTO_FIT = {"TRANSFORM": "log", "KERNEL": "auto", "ANISOTROPY": False, "TREND": "constant", "METHOD": "reml"}
QUICK_FIT = {"TRANSFORM": "log", "KERNEL": "exponential", "ANISOTROPY": False}


def report_data(path: str) -> dict:
    """The ``fieldcast-data`` block of the report at ``path``."""
    return embedded_data(Path(path).read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def meuse_layer(meuse):
    return point_layer(meuse.xy, {"zinc": meuse.zinc})


@pytest.fixture(scope="module")
def fit_run(qgis_processing, meuse_layer, tmp_path_factory) -> dict:  # noqa: F811
    """Outputs of fitmodel on ln(zinc) with a fit report."""
    folder = tmp_path_factory.mktemp("fit-report")
    return qgis_processing.run("fieldcast:fitmodel", {
        "INPUT": meuse_layer, "FIELD": "zinc", **AUTO_FIT, "OUTPUT_MODEL": str(folder / "zinc.json"),
        "OUTPUT_REPORT": str(folder / "zinc_fit.html")})


@pytest.fixture(scope="module")
def cv_run(qgis_processing, meuse_layer, fit_run, tmp_path_factory) -> dict:  # noqa: F811
    """Outputs of crossvalidate with the fitted model file and a cross-validation report."""
    folder = tmp_path_factory.mktemp("cv-report")
    return qgis_processing.run("fieldcast:crossvalidate", {
        "INPUT": meuse_layer, "FIELD": "zinc", "MODEL": fit_run["OUTPUT_MODEL"], "OUTPUT": "memory:",
        "OUTPUT_REPORT": str(folder / "zinc_cv.html")})


def test_fit_report_lists_the_model_files_candidates_and_marks_the_lowest_aic(fit_run):
    assert Path(fit_run["OUTPUT_REPORT"]).name == "zinc_fit.html"
    data = report_data(fit_run["OUTPUT_REPORT"])
    document = ModelDocument.load(fit_run["OUTPUT_MODEL"])
    in_file = document.fit["candidates"]
    in_report = data["candidates"]
    assert len(in_report) == 5
    assert [(c["family"], c["anisotropy"]) for c in in_report] == [(c["family"], c["anisotropy"]) for c in in_file]
    assert [c["aic"] for c in in_report] == [c["aic"] for c in in_file]
    chosen = [c for c in in_report if c["chosen"]]
    assert len(chosen) == 1
    assert chosen[0]["aic"] == min(c["aic"] for c in in_report) == fit_run["AIC"]
    assert chosen[0]["family"] == document.covariance.structures[0].family
    # AIC = 2k - 2 ln L (Akaike 1974).
    fit = data["fit"]
    assert fit["aic"] == pytest.approx(2 * fit["n_parameters"] - 2 * fit["log_likelihood"], rel=1e-12)
    assert all(c["loo_rmse"] > 0 for c in in_report)


def test_fit_report_describes_the_meuse_log_zinc_samples(fit_run, meuse):
    data = report_data(fit_run["OUTPUT_REPORT"])
    assert data["field"] == "zinc" and data["units"] == "metre" and data["crs_name"] == "Amersfoort / RD New"
    assert data["transform"]["kind"] == "log"
    counts = data["data"]
    assert (counts["n_read"], counts["n_used"], counts["merged_groups"], counts["skipped"]) == (155, 155, 0, [])
    # The published data hold 155 samples with zinc from 113 to 1839 ppm, median 326 ppm (meuse.csv);
    # the report's statistics are of ln(zinc).
    statistics = counts["statistics"]
    assert statistics["min"] == pytest.approx(math.log(113.0), rel=1e-12)
    assert statistics["median"] == pytest.approx(math.log(326.0), rel=1e-12)
    assert statistics["max"] == pytest.approx(math.log(1839.0), rel=1e-12)
    assert statistics["mean"] == pytest.approx(np.mean(np.log(meuse.zinc)), rel=1e-12)
    azimuths = [v["azimuth"] for v in data["variograms"]]
    assert azimuths == [None, 0.0, 45.0, 90.0, 135.0]


def test_crossvalidation_report_holds_the_algorithms_numbers(cv_run, meuse):
    data = report_data(cv_run["OUTPUT_REPORT"])
    assert data["scheme"] == "leave-one-out"
    for name in ("ME", "RMSE", "MSDR", "COVERAGE95"):
        assert data["summary"][name] == cv_run[name], name
    samples = data["samples"]
    assert samples["id"] == list(meuse.ids)  # memory-layer feature ids are 1..155, in file order
    np.testing.assert_array_equal(np.column_stack([samples["x"], samples["y"]]), meuse.xy)
    np.testing.assert_allclose(samples["observed"], np.log(meuse.zinc), rtol=1e-15)
    # RMSE by its definition, sqrt(mean((observed - predicted)^2)), from the listed predictions.
    errors = np.subtract(samples["observed"], samples["predicted"])
    assert cv_run["RMSE"] == pytest.approx(np.sqrt(np.mean(errors**2)), rel=1e-12)


def test_fit_report_rmse_of_the_chosen_candidate_is_the_crossvalidation_rmse(fit_run, cv_run):
    chosen = next(c for c in report_data(fit_run["OUTPUT_REPORT"])["candidates"] if c["chosen"])
    assert chosen["loo_rmse"] == pytest.approx(cv_run["RMSE"], rel=1e-9)


def test_fit_report_counts_skipped_and_merged_samples(qgis_processing, meuse, tmp_path):  # noqa: F811
    zinc = np.array(meuse.zinc)
    zinc[[3, 4]] = np.nan  # two samples without a value
    xy = np.vstack([meuse.xy, meuse.xy[10]])  # sample 10 entered twice
    layer = point_layer(xy, {"zinc": np.append(zinc, meuse.zinc[10])})
    no_geometry = QgsFeature(layer.fields())
    no_geometry.setAttributes([float(meuse.zinc[0])])
    layer.dataProvider().addFeature(no_geometry)
    outputs = qgis_processing.run("fieldcast:fitmodel", {
        "INPUT": layer, "FIELD": "zinc", **QUICK_FIT, "OUTPUT_MODEL": str(tmp_path / "m.json"),
        "OUTPUT_REPORT": str(tmp_path / "r.html")})
    counts = report_data(outputs["OUTPUT_REPORT"])["data"]
    assert counts["skipped"] == [{"reason": "value is NULL or not a number", "count": 2},
                                 {"reason": "no geometry", "count": 1}]
    assert (counts["merged_groups"], counts["merged_points"]) == (1, 2)
    assert (counts["n_read"], counts["n_used"]) == (154, 153)


def test_no_report_unless_asked(qgis_processing, meuse_layer, tmp_path):  # noqa: F811
    outputs = qgis_processing.run("fieldcast:fitmodel", {"INPUT": meuse_layer, "FIELD": "zinc", **QUICK_FIT,
                                                         "OUTPUT_MODEL": str(tmp_path / "m.json")})
    assert outputs.get("OUTPUT_REPORT") is None
    assert [path.name for path in tmp_path.iterdir()] == ["m.json"]


def test_cancel_while_cross_validating_candidates_leaves_no_file(qgis_processing, meuse_layer, tmp_path):  # noqa: F811
    fit_percent = importlib.import_module(f"{PACKAGE_NAME}.plugin.fit_model").FIT_PERCENT_WITH_REPORT
    feedback = CancelAfterFirstProgress(start_percent=fit_percent)  # the fit ends at exactly fit_percent
    with pytest.raises(QgsProcessingException, match="Cancelled"):
        qgis_processing.run("fieldcast:fitmodel", {
            "INPUT": meuse_layer, "FIELD": "zinc", **AUTO_FIT, "OUTPUT_MODEL": str(tmp_path / "m.json"),
            "OUTPUT_REPORT": str(tmp_path / "r.html")}, feedback=feedback)
    assert fit_percent < feedback.progress() < 99.0  # stopped after the first of the five candidates
    assert list(tmp_path.iterdir()) == []


def test_missing_report_folder_is_refused_before_fitting(qgis_processing, meuse_layer, tmp_path):  # noqa: F811
    feedback = QgsProcessingFeedback()
    with pytest.raises(QgsProcessingException, match="does not exist; choose an existing folder for the report"):
        qgis_processing.run("fieldcast:fitmodel", {
            "INPUT": meuse_layer, "FIELD": "zinc", **QUICK_FIT, "OUTPUT_MODEL": str(tmp_path / "m.json"),
            "OUTPUT_REPORT": str(tmp_path / "missing" / "r.html")}, feedback=feedback)
    assert "Fitting with" not in feedback.textLog()
    assert list(tmp_path.iterdir()) == []


def test_report_error_becomes_a_processing_error(qgis_processing, meuse_layer, fit_run, tmp_path,  # noqa: F811
                                                 monkeypatch):
    module = importlib.import_module(f"{PACKAGE_NAME}.plugin.cross_validate")
    report_error = importlib.import_module(f"{PACKAGE_NAME}.plugin.report.page").ReportError

    def refuse(*args, **kwargs):
        raise report_error("The report cannot be written; change this.")

    monkeypatch.setattr(module, "write_crossvalidation_report", refuse)
    with pytest.raises(QgsProcessingException, match="The report cannot be written; change this."):
        qgis_processing.run("fieldcast:crossvalidate", {
            "INPUT": meuse_layer, "FIELD": "zinc", "MODEL": fit_run["OUTPUT_MODEL"], "OUTPUT": "memory:",
            "OUTPUT_REPORT": str(tmp_path / "r.html")})
    assert list(tmp_path.iterdir()) == []


def test_fit_outputs_name_the_family_and_the_effective_range(fit_run):
    first = ModelDocument.load(fit_run["OUTPUT_MODEL"]).covariance.structures[0]
    assert fit_run["FAMILY"] == first.family
    assert fit_run["EFFECTIVE_RANGE"] == pytest.approx(first.effective_range, rel=1e-12)
