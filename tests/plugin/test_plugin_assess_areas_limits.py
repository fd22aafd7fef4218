"""fieldcast:assessareas with values below a limit (BELOW_LIMIT_FIELD) and per-sample error variances.

Data: the published Meuse topsoil samples (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp package;
tests/data/README.md): the 21 cadmium values at the data set's smallest value, 0.2 ppm, are marked as reporting
limits, as a laboratory would report them; the error variances are a stated test diagonal (Meuse publishes none).
The references are computed here: the bordered ordinary-kriging system of each completed data set (Cressie 1993,
*Statistics for Spatial Data*, rev. ed., sections 3.2 and 5.2: a block average as the average of point kriging),
combined by Rubin's rules (Rubin 1987, *Multiple Imputation for Nonresponse in Surveys*).
"""
from __future__ import annotations

import numpy as np
import pytest
from qgis.core import QgsGeometry, QgsProcessingFeedback, QgsVectorLayer

from fieldcast.algorithms.censored.imputed_kriging import impute_censored
from fieldcast.algorithms.io.model_file import ModelDocument
from fieldcast.algorithms.io.polygons import discretise_polygon
from qgis_support import fieldcast_plugin, point_layer, polygon_layer, qgis_processing  # noqa: F401 - fixtures
from reference import ordinary_joint_law

UNITS = ["POLYGON ((179900 331500, 180300 331500, 180300 331900, 179900 331900, 179900 331500))",
         "POLYGON ((180300 332300, 180800 332300, 180800 332700, 180300 332700, 180300 332300))"]
COMMON = {"FIELD": "cd", "THRESHOLD": 3.0, "REALIZATIONS": 200}


def points(wkt: str) -> np.ndarray:
    return discretise_polygon(QgsGeometry.fromWkt(wkt).asWkb().data()).points


@pytest.fixture(scope="module")
def cadmium(qgis_processing, meuse, tmp_path_factory):  # noqa: F811
    """The samples (limits flagged in "below", a stated error variance in "err") and a no-transform model of them
    fitted with the limits."""
    below = meuse.cadmium == 0.2
    errors = 0.05 + 0.05 * (np.arange(len(below)) % 5)  # stated test diagonal, ppm squared
    layer = point_layer(meuse.xy, {"cd": meuse.cadmium, "below": below.astype(float), "none": np.zeros(len(below)),
                                   "err": errors})
    path = str(tmp_path_factory.mktemp("areas_limits") / "cd.json")
    qgis_processing.run("fieldcast:fitmodel", {
        "INPUT": layer, "FIELD": "cd", "BELOW_LIMIT_FIELD": "below", "TRANSFORM": "none", "KERNEL": "exponential",
        "ANISOTROPY": False, "TREND": "constant", "OUTPUT_REPORT": None, "OUTPUT_MODEL": path})
    return layer, below, errors, path


def assessed(qgis_processing, layer, model, tmp_path, name, **options):  # noqa: F811
    feedback = QgsProcessingFeedback()
    result = qgis_processing.run("fieldcast:assessareas", {
        "INPUT": layer, "MODEL": model, "AREAS": polygon_layer(UNITS), "OUTPUT": str(tmp_path / f"{name}.gpkg"),
        **COMMON, **options}, feedback=feedback)
    rows = list(QgsVectorLayer(result["OUTPUT"], name, "ogr").getFeatures())
    return rows, feedback.textLog()


def test_polygon_results_are_conditioned_on_the_limits(qgis_processing, meuse, cadmium, tmp_path):  # noqa: F811
    layer, below, _, model = cadmium
    rows, log = assessed(qgis_processing, layer, model, tmp_path, "limits", BELOW_LIMIT_FIELD="below")
    assert "21 of 155 values of cd are below a reporting limit (21 marked in below)" in log
    assert "Variances add the spread between the completed data sets" in log
    document = ModelDocument.load(model)
    # the plugin's completed data sets: 20 joint draws below the limits, seed 1 (algorithm_base.imputed_samples)
    sets = impute_censored(meuse.xy, meuse.cadmium, below, document.covariance, document.mean,
                           document.coefficients)
    for row, unit in zip(rows, UNITS):
        means, within = [], None
        for values in sets:
            mu, joint, _ = ordinary_joint_law(meuse.xy, values, document.covariance, points(unit))
            means.append(np.mean(mu))
            within = np.mean(joint)
        means = np.array(means)
        assert row["cd_mean"] == pytest.approx(means.mean(), rel=1e-6)
        # Rubin 1987: within variance plus (1 + 1/m) times the variance between the sets' means
        assert row["cd_sd"] == pytest.approx(np.sqrt(within + (1 + 1 / len(sets)) * means.var(ddof=1)), rel=1e-6)
        assert means.var() > 0


def test_a_below_limit_field_without_limits_changes_nothing(qgis_processing, cadmium, tmp_path):  # noqa: F811
    layer, _, _, model = cadmium
    plain, _ = assessed(qgis_processing, layer, model, tmp_path, "plain")
    unmarked, log = assessed(qgis_processing, layer, model, tmp_path, "unmarked", BELOW_LIMIT_FIELD="none")
    assert "completed data sets" not in log
    for first, second in zip(plain, unmarked):
        assert first.attributes()[1:] == second.attributes()[1:]


def test_error_variances_enter_the_samples_diagonal(qgis_processing, meuse, cadmium, tmp_path):  # noqa: F811
    layer, _, errors, model = cadmium
    rows, log = assessed(qgis_processing, layer, model, tmp_path, "errors", ERROR_VARIANCE_FIELD="err")
    assert "kriging adds those of 'err' to its nugget" in log
    covariance = ModelDocument.load(model).covariance
    for row, unit in zip(rows, UNITS):
        # the bordered ordinary-kriging system with the stated diagonal (Cressie 1993, sections 3.2, 5.2)
        mu, joint, _ = ordinary_joint_law(meuse.xy, meuse.cadmium, covariance, points(unit), errors)
        assert row["cd_mean"] == pytest.approx(np.mean(mu), rel=1e-6)
        assert row["cd_sd"] == pytest.approx(np.sqrt(np.mean(joint)), rel=1e-6)
