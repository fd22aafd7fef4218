"""Every algorithm that fits a model logs the same fit lines and warnings as 'Fit covariance model'.

Data: the published Meuse topsoil samples (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp package;
tests/data/README.md), EPSG:28992 metres. Cases: the first 20 samples (fewer than 30: the few-samples warning,
common practice) and a constant-mean exponential REML fit of ln(zinc) on all samples, whose range runs past
the study while the residuals' semivariogram levels off inside it (tests/fit/test_range_check.py).
"""
from __future__ import annotations

import pytest
from qgis.core import QgsProcessingFeedback

from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures

LONG_RANGE = {"TRANSFORM": "log", "KERNEL": "exponential", "ANISOTROPY": False, "TREND": "constant",
              "METHOD": "reml"}
GRID = {"EXTENT": "178440,181560,329600,333760 [EPSG:28992]", "PIXEL_SIZE": 400.0}


def run_log(qgis_processing, algorithm: str, parameters: dict) -> str:  # noqa: F811
    feedback = QgsProcessingFeedback()
    qgis_processing.run(f"fieldcast:{algorithm}", parameters, feedback=feedback)
    return feedback.textLog()


def runs_that_fit(meuse, n: int, tmp_path, choices: dict) -> list[tuple[str, dict, str]]:
    """(algorithm, parameters, line prefix) of every algorithm that fits ``n`` Meuse zinc samples itself."""
    layer = point_layer(meuse.xy[:n], {"zinc": meuse.zinc[:n], "copper": meuse.copper[:n]})
    return [
        ("fitmodel", {"INPUT": layer, "FIELD": "zinc", **choices, "OUTPUT_MODEL": str(tmp_path / "m.json"),
                      "OUTPUT_REPORT": None}, ""),
        ("predictmany", {"INPUT": layer, "FIELDS": ["zinc", "copper"], **choices, **GRID,
                         "OUTPUT_FOLDER": str(tmp_path / "each")}, "zinc: "),
        ("predictmany", {"INPUT": layer, "FIELDS": ["zinc", "copper"], **choices, "SHARED_MODEL": True, **GRID,
                         "OUTPUT_FOLDER": str(tmp_path / "shared")}, "zinc: "),
    ]


@pytest.mark.parametrize("index", [0, 1, 2])
def test_every_fit_logs_its_candidates_and_the_long_range_advice(qgis_processing, meuse, tmp_path,  # noqa: F811
                                                                 index):
    algorithm, parameters, prefix = runs_that_fit(meuse, len(meuse.xy), tmp_path, LONG_RANGE)[index]
    log = run_log(qgis_processing, algorithm, parameters)
    assert f"{prefix}Chosen model: exponential, isotropic, effective range" in log
    assert f"{prefix}Candidates (1; ΔAIC" in log
    assert f"{prefix}The fitted effective range" in log and "refit with TREND = linear or quadratic" in log


@pytest.mark.parametrize("index", [0, 1, 2])
def test_every_fit_of_twenty_samples_warns_the_model_is_poorly_determined(qgis_processing, meuse, tmp_path,  # noqa: F811
                                                                          index):
    # Common practice (a rule of thumb): fewer than about 30 samples determine a covariance model poorly.
    algorithm, parameters, prefix = runs_that_fit(meuse, 20, tmp_path, {"KERNEL": "exponential",
                                                                        "ANISOTROPY": False})[index]
    assert f"{prefix}Only 20 samples" in run_log(qgis_processing, algorithm, parameters)


def test_predict_without_a_model_logs_the_fit_like_fitmodel(qgis_processing, meuse, tmp_path):  # noqa: F811
    layer = point_layer(meuse.xy[:20], {"zinc": meuse.zinc[:20]})
    log = run_log(qgis_processing, "predict", {"INPUT": layer, "FIELD": "zinc", **GRID,
                                               "OUTPUT": str(tmp_path / "zinc.tif")})
    assert "Chosen model: " in log and "Candidates (" in log and "ΔAIC" in log
    assert "Only 20 samples" in log
