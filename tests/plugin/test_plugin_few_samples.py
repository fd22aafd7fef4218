"""'Fit covariance model' with very few samples: a warning that the model is poorly determined, never a crash.

Samples: the first rows of the published Meuse topsoil data (Rikken & Van Rijn 1993; tests/data/README.md),
EPSG:28992 metres, modelled as ln(zinc). The algorithms run in-process through ``processing.run``.
"""
from __future__ import annotations

from pathlib import Path

import pytest
from qgis.core import QgsProcessingFeedback

from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures
from test_plugin_reports import report_data


class WarningFeedback(QgsProcessingFeedback):
    """Feedback that keeps the warnings and errors pushed to the log."""

    def __init__(self) -> None:
        super().__init__()
        self.warnings: list[str] = []
        self.errors: list[str] = []

    def pushWarning(self, warning: str) -> None:  # noqa: N802 - Qt name
        super().pushWarning(warning)
        self.warnings.append(warning)

    def reportError(self, error: str, fatalError: bool = False) -> None:  # noqa: N802, N803 - Qt names
        super().reportError(error, fatalError)
        self.errors.append(error)


def fit_first(qgis_processing, meuse, folder: Path, n: int, **choices) -> tuple[dict, WarningFeedback]:  # noqa: F811
    feedback = WarningFeedback()
    outputs = qgis_processing.run("fieldcast:fitmodel", {
        "INPUT": point_layer(meuse.xy[:n], {"zinc": meuse.zinc[:n]}), "FIELD": "zinc", "TRANSFORM": "log",
        **choices, "OUTPUT_MODEL": str(folder / "model.json"), "OUTPUT_REPORT": str(folder / "fit.html")},
        feedback=feedback)
    return outputs, feedback


@pytest.mark.parametrize("n", [3, 4, 5])
def test_a_fit_of_three_to_five_samples_writes_its_report_and_warns_the_model_is_poorly_determined(
        qgis_processing, meuse, tmp_path, n):  # noqa: F811
    outputs, feedback = fit_first(qgis_processing, meuse, tmp_path, n)  # defaults: auto kernel, anisotropy on
    assert not feedback.errors
    assert Path(outputs["OUTPUT_MODEL"]).is_file() and Path(outputs["OUTPUT_REPORT"]).is_file()
    # Common practice (a rule of thumb): variogram estimation wants 50-100 samples or more.
    few = [w for w in feedback.warnings if w.startswith(f"Only {n} samples")]
    assert len(few) == 1 and "rule of thumb" in few[0] and "50 to 100" in few[0]
    data = report_data(outputs["OUTPUT_REPORT"])
    assert data["data"]["n_used"] == n
    assert few[0] in data["warnings"]


def test_too_few_samples_for_leave_one_out_leave_the_reports_rmse_column_empty(qgis_processing, meuse,  # noqa: F811
                                                                              tmp_path):
    outputs, feedback = fit_first(qgis_processing, meuse, tmp_path, 4, KERNEL="exponential", ANISOTROPY=False,
                                  TREND="linear")
    assert any(w.startswith("The report shows no leave-one-out RMSE") for w in feedback.warnings)
    assert [c["loo_rmse"] for c in report_data(outputs["OUTPUT_REPORT"])["candidates"]] == [None]


def test_thirty_samples_get_no_sample_size_warning(qgis_processing, meuse, tmp_path):  # noqa: F811
    _, feedback = fit_first(qgis_processing, meuse, tmp_path, 30, KERNEL="exponential", ANISOTROPY=False)
    assert not any(w.startswith("Only ") for w in feedback.warnings)
