"""An unexpected exception inside an algorithm reaches the user as a Processing error, its traceback in the log.

Samples are the published Meuse data (tests/data/README.md).
"""
from __future__ import annotations

import importlib

import pytest
from qgis.core import QgsFeatureSink, QgsProcessingException, QgsProcessingFeedback

from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures
from repo_package import PACKAGE_NAME


class LoggingFeedback(QgsProcessingFeedback):
    """Feedback that keeps the errors reported to the log."""

    def __init__(self) -> None:
        super().__init__()
        self.errors: list[str] = []

    def reportError(self, error: str, fatalError: bool = False) -> None:  # noqa: N802, N803 - Qt names
        super().reportError(error, fatalError)
        self.errors.append(error)


def broken_fit(*args, **kwargs):
    """Stands in for the engine's fit and fails the way a bug would."""
    return 1 / 0


def test_an_unexpected_engine_failure_is_reported_without_leaving_files(qgis_processing, meuse,  # noqa: F811
                                                                         monkeypatch, tmp_path):
    monkeypatch.setattr(importlib.import_module(f"{PACKAGE_NAME}.plugin.model_source"), "fit_with", broken_fit)
    feedback = LoggingFeedback()
    with pytest.raises(QgsProcessingException) as error:
        qgis_processing.run("fieldcast:fitmodel", {
            "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc",
            "OUTPUT_MODEL": str(tmp_path / "zinc.json"), "OUTPUT_REPORT": str(tmp_path / "fit.html")},
            feedback=feedback)
    assert str(error.value) == ("Internal error in Fit covariance model: ZeroDivisionError: division by zero. "
                                "Please report it; the details are in the log.")
    assert any("Traceback (most recent call last)" in text and "in broken_fit" in text for text in feedback.errors)
    assert list(tmp_path.iterdir()) == []


def misused_fit(*args, **kwargs):
    """Stands in for the engine's fit and breaks a function's contract, as a bug in a caller would."""
    raise importlib.import_module(f"{PACKAGE_NAME}.algorithms.errors").FieldcastUsageError("rows 5..8 are outside 0..7")


def test_a_broken_contract_is_an_internal_error_not_advice(qgis_processing, meuse, monkeypatch, tmp_path):  # noqa: F811
    # A FieldcastUsageError is a FieldcastError, but no user input causes it: the user sees "Internal error".
    monkeypatch.setattr(importlib.import_module(f"{PACKAGE_NAME}.plugin.model_source"), "fit_with", misused_fit)
    feedback = LoggingFeedback()
    with pytest.raises(QgsProcessingException) as error:
        qgis_processing.run("fieldcast:fitmodel", {
            "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc",
            "OUTPUT_MODEL": str(tmp_path / "zinc.json")}, feedback=feedback)
    assert str(error.value) == ("Internal error in Fit covariance model: FieldcastUsageError: rows 5..8 are outside "
                                "0..7. Please report it; the details are in the log.")
    assert any("in misused_fit" in text for text in feedback.errors)
    assert list(tmp_path.iterdir()) == []


class FullDiskSink(QgsFeatureSink):
    """A sink that takes ``accepted`` features and then refuses every further one, as a full disk would."""

    def __init__(self, accepted: int) -> None:
        super().__init__()
        self.accepted = accepted

    def addFeature(self, feature, flags=None) -> bool:  # noqa: N802 - QGIS name
        self.accepted -= 1
        return self.accepted >= 0

    def addFeatures(self, features, flags=None) -> bool:  # noqa: N802 - QGIS name
        return all(self.addFeature(feature) for feature in features)

    def lastError(self) -> str:  # noqa: N802 - QGIS name
        return "No space left on device"


@pytest.fixture()
def full_disk(monkeypatch):
    """Make every algorithm's sinks refuse their third feature; their destination is reported as ``/full/disk``."""
    base = importlib.import_module(f"{PACKAGE_NAME}.plugin.algorithm_base").FieldcastAlgorithm
    monkeypatch.setattr(base, "parameterAsSink", lambda self, *args, **kwargs: (FullDiskSink(2), "/full/disk"))


FULL_DISK_MESSAGE = ("Could not write feature 3 to /full/disk: No space left on device. Check the disk space and "
                     "that the file is writable, or choose another output file.")


@pytest.fixture()
def zinc_model(qgis_processing, meuse, tmp_path) -> str:  # noqa: F811
    path = str(tmp_path / "zinc.json")
    qgis_processing.run("fieldcast:fitmodel", {"INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc",
                                               "KERNEL": "exponential", "ANISOTROPY": False, "OUTPUT_MODEL": path})
    return path


def test_cross_validation_stops_when_the_sink_refuses_a_point(qgis_processing, meuse, zinc_model,  # noqa: F811
                                                              full_disk):
    with pytest.raises(QgsProcessingException) as error:
        qgis_processing.run("fieldcast:crossvalidate", {
            "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", "MODEL": zinc_model,
            "OUTPUT": "TEMPORARY_OUTPUT"})
    assert str(error.value) == FULL_DISK_MESSAGE


def test_simulate_stops_when_the_table_refuses_a_row(qgis_processing, meuse, zinc_model, full_disk,  # noqa: F811
                                                     tmp_path):
    with pytest.raises(QgsProcessingException) as error:
        qgis_processing.run("fieldcast:simulate", {
            "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", "MODEL": zinc_model,
            "PIXEL_SIZE": 400, "REALIZATIONS": 4, "OUTPUT": str(tmp_path / "sims.tif"),
            "OUTPUT_TABLE": "TEMPORARY_OUTPUT"})
    assert str(error.value) == FULL_DISK_MESSAGE
