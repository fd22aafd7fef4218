"""An unexpected exception inside an algorithm reaches the user as a Processing error, its traceback in the log.

Samples are the published Meuse data (tests/data/README.md).
"""
from __future__ import annotations

import importlib

import pytest
from qgis.core import QgsProcessingException, QgsProcessingFeedback

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
    monkeypatch.setattr(importlib.import_module(f"{PACKAGE_NAME}.plugin.model_source"), "fit_model", broken_fit)
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
