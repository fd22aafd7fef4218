"""Values below a limit in the toolbox: "<x" text entries, BELOW_LIMIT_FIELD, the log counts, the model file.

Data: the published Meuse topsoil samples (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp package;
tests/data/README.md): 21 of the 155 cadmium values sit at the data set's smallest value, 0.2 ppm, the case of the
task; here they are written as "<0.2" (text field) or marked in a 0/1 field, as a laboratory would report them.
"""
from __future__ import annotations

import json

import pytest
from qgis.core import QgsProcessingException, QgsProcessingFeedback

from qgis_process_support import write_point_geopackage
from qgis_support import fieldcast_plugin, qgis_processing  # noqa: F401 - fixtures

CHOICES = {"TRANSFORM": "log", "KERNEL": "exponential", "ANISOTROPY": False, "OUTPUT_REPORT": None}


def meuse_layer(meuse, path) -> str:
    at_minimum = meuse.cadmium == 0.2
    text = [f"<{v:g}" if low else f"{v:g}" for v, low in zip(meuse.cadmium, at_minimum)]
    return write_point_geopackage(path, "samples", meuse.xy, {
        "cd_text": text, "cd": [float(v) for v in meuse.cadmium], "below": [int(low) for low in at_minimum]})


def run(qgis_processing, parameters):  # noqa: F811
    feedback = QgsProcessingFeedback()
    qgis_processing.run("fieldcast:fitmodel", {**CHOICES, **parameters}, feedback=feedback)
    with open(parameters["OUTPUT_MODEL"], encoding="utf-8") as stream:
        return feedback.textLog(), json.load(stream)


def test_text_limits_are_fitted_as_limits_and_recorded(qgis_processing, meuse, tmp_path):  # noqa: F811
    layer = meuse_layer(meuse, tmp_path / "cd.gpkg")
    log, model = run(qgis_processing, {"INPUT": layer, "FIELD": "cd_text", "OUTPUT_MODEL": str(tmp_path / "m.json")})
    assert '21 of 155 values of cd_text are below a reporting limit (21 written as "<limit")' in log
    assert "Values below a limit: 21 of 155 samples, kept as limits in the likelihood (stochastic EM" in log
    assert "equal its smallest value" not in log
    assert model["fit"]["censored"]["count"] == 21 and model["fit"]["censored"]["treatment"] == "likelihood"


def test_flag_field_with_substitution_is_recorded(qgis_processing, meuse, tmp_path):  # noqa: F811
    layer = meuse_layer(meuse, tmp_path / "cd.gpkg")
    log, model = run(qgis_processing, {"INPUT": layer, "FIELD": "cd", "BELOW_LIMIT_FIELD": "below",
                                       "NONDETECTS": "substitution", "SUBSTITUTION_FACTOR": 0.5,
                                       "OUTPUT_MODEL": str(tmp_path / "m.json")})
    assert "21 of 155 values of cd are below a reporting limit (21 marked in below)" in log
    assert "replaced by 0.5 times their limit (substitution)" in log
    assert model["fit"]["censored"] == {"count": 21, "samples": 155, "treatment": "substitution", "factor": 0.5}


def test_unmarked_pile_at_the_minimum_is_flagged(qgis_processing, meuse, tmp_path):  # noqa: F811
    layer = meuse_layer(meuse, tmp_path / "cd.gpkg")
    log, model = run(qgis_processing, {"INPUT": layer, "FIELD": "cd", "OUTPUT_MODEL": str(tmp_path / "m.json")})
    assert "21 of 155 values of cd equal its smallest value 0.2" in log and "BELOW_LIMIT_FIELD" in log
    assert "censored" not in model["fit"]


def test_bad_substitution_factor_is_refused_without_output(qgis_processing, meuse, tmp_path):  # noqa: F811
    layer = meuse_layer(meuse, tmp_path / "cd.gpkg")
    target = tmp_path / "m.json"
    with pytest.raises(QgsProcessingException, match="SUBSTITUTION_FACTOR"):
        run(qgis_processing, {"INPUT": layer, "FIELD": "cd_text", "NONDETECTS": "substitution",
                              "SUBSTITUTION_FACTOR": 1.5, "OUTPUT_MODEL": str(target)})
    assert not target.exists()


def test_missing_below_limit_field_is_refused(qgis_processing, meuse, tmp_path):  # noqa: F811
    layer = meuse_layer(meuse, tmp_path / "cd.gpkg")
    with pytest.raises(QgsProcessingException, match="no field 'nope' for BELOW_LIMIT_FIELD"):
        run(qgis_processing, {"INPUT": layer, "FIELD": "cd", "BELOW_LIMIT_FIELD": "nope",
                              "OUTPUT_MODEL": str(tmp_path / "m.json")})


def test_predictpoints_with_limits_logs_their_treatment(qgis_processing, meuse, tmp_path):  # noqa: F811
    layer = meuse_layer(meuse, tmp_path / "cd.gpkg")
    model = tmp_path / "m.json"
    run(qgis_processing, {"INPUT": layer, "FIELD": "cd_text", "OUTPUT_MODEL": str(model)})
    feedback = QgsProcessingFeedback()
    qgis_processing.run("fieldcast:predictpoints", {"INPUT": layer, "FIELD": "cd_text", "MODEL": str(model),
                                                    "TARGETS": layer, "OUTPUT": str(tmp_path / "p.gpkg")},
                        feedback=feedback)
    log = feedback.textLog()
    assert "21 sample(s) below a limit enter kriging as their conditional mean" in log
    assert "Variances add the spread between the completed data sets (Rubin's rules)." in log


def test_fit_report_says_how_the_limits_were_treated(qgis_processing, meuse, tmp_path):  # noqa: F811
    layer = meuse_layer(meuse, tmp_path / "cd.gpkg")
    report = tmp_path / "fit.html"
    run(qgis_processing, {"INPUT": layer, "FIELD": "cd", "BELOW_LIMIT_FIELD": "below", "NONDETECTS": "substitution",
                          "OUTPUT_MODEL": str(tmp_path / "m.json"), "OUTPUT_REPORT": str(report)})
    assert "Values below a limit: 21 of 155 samples, replaced by 0.5 times their limit" in report.read_text("utf-8")


def test_predictmany_fits_limits_per_field_and_refuses_them_for_a_shared_model(qgis_processing, meuse,  # noqa: F811
                                                                               tmp_path):
    layer = meuse_layer(meuse, tmp_path / "cd.gpkg")
    grid = {"EXTENT": "178440,181560,329600,333760 [EPSG:28992]", "PIXEL_SIZE": 400.0}
    common = {"INPUT": layer, "FIELDS": ["cd"], "BELOW_LIMIT_FIELD": "below", **CHOICES, **grid}
    del common["OUTPUT_REPORT"]
    feedback = QgsProcessingFeedback()
    qgis_processing.run("fieldcast:predictmany", {**common, "OUTPUT_FOLDER": str(tmp_path / "each")},
                        feedback=feedback)
    assert "cd: Values below a limit: 21 of 155 samples, kept as limits" in feedback.textLog()
    assert "Variances add the spread between the completed data sets" in feedback.textLog()
    with pytest.raises(QgsProcessingException, match="SHARED_MODEL"):
        qgis_processing.run("fieldcast:predictmany", {**common, "SHARED_MODEL": True,
                                                      "OUTPUT_FOLDER": str(tmp_path / "shared")})
    assert not (tmp_path / "shared").exists() or not any((tmp_path / "shared").iterdir())


def test_predict_and_crossvalidate_with_limits_say_what_the_variances_hold(qgis_processing, meuse,  # noqa: F811
                                                                            tmp_path):
    layer = meuse_layer(meuse, tmp_path / "cd.gpkg")
    model = tmp_path / "m.json"
    run(qgis_processing, {"INPUT": layer, "FIELD": "cd_text", "OUTPUT_MODEL": str(model)})
    grid = {"EXTENT": "178440,181560,329600,333760 [EPSG:28992]", "PIXEL_SIZE": 400.0}
    feedback = QgsProcessingFeedback()
    qgis_processing.run("fieldcast:predict", {"INPUT": layer, "FIELD": "cd_text", "MODEL": str(model), **grid,
                                              "OUTPUT": str(tmp_path / "p.tif")}, feedback=feedback)
    assert "Variances add the spread between the completed data sets" in feedback.textLog()
    feedback = QgsProcessingFeedback()
    qgis_processing.run("fieldcast:crossvalidate", {"INPUT": layer, "FIELD": "cd_text", "MODEL": str(model),
                                                    "OUTPUT": str(tmp_path / "cv.gpkg"), "OUTPUT_REPORT": None},
                        feedback=feedback)
    assert "leave out the spread between the completed data sets" in feedback.textLog()
    assert "The 21 sample(s) below a limit are predicted against their conditional mean" in feedback.textLog()


def test_simulate_with_limits_conditions_realisations_on_completed_sets(qgis_processing, meuse,  # noqa: F811
                                                                        tmp_path):
    layer = meuse_layer(meuse, tmp_path / "cd.gpkg")
    model = tmp_path / "m.json"
    run(qgis_processing, {"INPUT": layer, "FIELD": "cd_text", "OUTPUT_MODEL": str(model)})
    feedback = QgsProcessingFeedback()
    qgis_processing.run("fieldcast:simulate", {"INPUT": layer, "FIELD": "cd_text", "MODEL": str(model),
                                               "EXTENT": "178440,181560,329600,333760 [EPSG:28992]",
                                               "PIXEL_SIZE": 400.0, "REALIZATIONS": 3,
                                               "OUTPUT": str(tmp_path / "sim.tif")}, feedback=feedback)
    assert "Each realisation is conditioned on one of the 20 completed data sets" in feedback.textLog()
