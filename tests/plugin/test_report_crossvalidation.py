"""The cross-validation report on the Meuse zinc data: summary, worst samples and plots carry the right numbers."""
from __future__ import annotations

import dataclasses
import json
import re
import sys

import numpy as np
import pytest
from scipy import stats

from fieldcast.algorithms.predict.crossval import k_fold, leave_one_out
from fieldcast.plugin.report.crossvalidation_report import summary_rows, write_crossvalidation_report
from fieldcast.plugin.report.page import ReportError
from test_report_fit import log_zinc_model

DATA_BLOCK = re.compile(r'<script type="application/json" id="fieldcast-data">(.*?)</script>', re.S)
SPEC_BLOCK = r'<script type="application/json" id="{}-spec">(.*?)</script>'


def embedded_data(html: str) -> dict:
    """The JSON block ``fieldcast-data`` of a report page."""
    return json.loads(DATA_BLOCK.search(html).group(1))


@pytest.fixture(scope="module")
def zinc_model(meuse):
    """Samples and an isotropic exponential REML model of log zinc."""
    samples, _, model = log_zinc_model(meuse, kernel="exponential", anisotropy=False)
    return samples, model


@pytest.fixture(scope="module")
def loo_report(zinc_model, tmp_path_factory):
    """The leave-one-out cross-validation and the HTML text of its report."""
    samples, model = zinc_model
    cv = leave_one_out(samples.xy, samples.values, model.covariance, model.mean)
    path = tmp_path_factory.mktemp("cv-report") / "cv.html"
    write_crossvalidation_report(path, cv=cv, ids=samples.ids, xy=samples.xy, model=model,
                                 crs_name="Amersfoort / RD New")
    return cv, path.read_text(encoding="utf-8")


def ordinary_kriging_without(xy, z, covariance, i):
    """Prediction and error variance of observation ``i`` from the others by ordinary kriging.

    Ordinary kriging system in covariance form (Cressie 1993, Statistics for Spatial Data, sec. 3.2):
    [[C, 1], [1', 0]] [w; m] = [c0; 1], prediction w'z, variance C(0) - w'c0 - m, with C(0) the sill
    because the held-out value is itself a noisy observation.
    """
    others = np.arange(len(z)) != i
    c = covariance.data_covariance(xy[others])
    c0 = covariance.cross_covariance(xy[others], xy[i:i + 1])[:, 0]
    n = len(c0)
    system = np.block([[c, np.ones((n, 1))], [np.ones((1, n)), np.zeros((1, 1))]])
    solution = np.linalg.solve(system, np.append(c0, 1.0))
    weights, multiplier = solution[:n], solution[n]
    return weights @ z[others], covariance.sill - weights @ c0 - multiplier


def test_summary_in_page_matches_independent_computation(loo_report):
    cv, html = loo_report
    data = embedded_data(html)
    summary = data["summary"]
    assert {key: summary[key] for key in cv.summary()} == cv.summary()
    observed, predicted = np.asarray(data["samples"]["observed"]), np.asarray(data["samples"]["predicted"])
    variance = np.asarray(data["samples"]["variance"])
    error = observed - predicted
    assert summary["ME"] == pytest.approx(error.mean(), abs=1e-12)
    assert summary["RMSE"] == pytest.approx(np.sqrt(np.mean(error**2)), rel=1e-12)
    assert summary["MSDR"] == pytest.approx(np.mean(error**2 / variance), rel=1e-10)
    # Reference library: the two-sided 95 % normal interval is +- norm.ppf(0.975).
    inside = np.abs(error) <= stats.norm.ppf(0.975) * np.sqrt(variance)
    assert summary["COVERAGE95"] == pytest.approx(inside.mean(), abs=1e-12)
    assert data["scheme"] == "leave-one-out"
    for key, phrase in (("ME", "Near 0"), ("MSDR", "Near 1"), ("COVERAGE95", "Near 95 %")):
        row = re.search(rf'<tr data-statistic="{key}">(.*?)</tr>', html, re.S).group(1)
        assert phrase in row


def test_predictions_agree_with_ordinary_kriging_system(zinc_model, loo_report):
    samples, model = zinc_model
    data = embedded_data(loo_report[1])
    for i in (0, 66, 154):
        prediction, variance = ordinary_kriging_without(samples.xy, samples.values, model.covariance, i)
        assert data["samples"]["predicted"][i] == pytest.approx(prediction, rel=1e-8)
        assert data["samples"]["variance"][i] == pytest.approx(variance, rel=1e-8)


def test_worst_ten_listed_by_id(loo_report, meuse):
    cv, html = loo_report
    order = sorted(range(155), key=lambda i: -abs(cv.standardized[i]))[:10]
    expected_ids = [int(meuse.ids[i]) for i in order]
    data = embedded_data(html)
    assert [row["id"] for row in data["worst"]] == expected_ids
    assert re.findall(r'<tr data-id="(\d+)">', html) == [str(i) for i in expected_ids]
    first = data["worst"][0]
    assert first["standardized"] == pytest.approx(cv.standardized[order[0]], rel=1e-15)
    assert (first["x"], first["y"]) == tuple(meuse.xy[order[0]])


def test_histogram_against_standard_normal(loo_report):
    cv, html = loo_report
    bins = embedded_data(html)["standardized_histogram"]
    edges, density = np.asarray(bins["edges"]), np.asarray(bins["density"])
    assert sum(bins["counts"]) == 155
    assert np.sum(density * np.diff(edges)) == pytest.approx(1.0, rel=1e-12)
    spec = json.loads(re.search(SPEC_BLOCK.format("fc-plot-residual-histogram"), html, re.S).group(1))
    curve = next(trace for trace in spec["data"] if trace["type"] == "scatter")
    # Reference library: scipy's standard normal density.
    np.testing.assert_allclose(curve["y"], stats.norm.pdf(curve["x"]), rtol=1e-12)
    assert min(curve["x"]) <= -3 and max(curve["x"]) >= 3


def test_observed_predicted_and_residual_map_plots(loo_report):
    cv, html = loo_report
    scatter = json.loads(re.search(SPEC_BLOCK.format("fc-plot-observed-predicted"), html, re.S).group(1))
    line, points = scatter["data"]
    assert line["x"] == line["y"]  # the 1:1 line
    np.testing.assert_array_equal(points["x"], cv.predicted)
    np.testing.assert_array_equal(points["y"], cv.observed)
    residuals = json.loads(re.search(SPEC_BLOCK.format("fc-plot-residual-map"), html, re.S).group(1))
    marker = residuals["data"][0]["marker"]
    np.testing.assert_array_equal(marker["color"], cv.standardized)
    assert marker["cmin"] == -marker["cmax"]


def test_k_fold_report_shows_folds(zinc_model, tmp_path):
    samples, model = zinc_model
    cv = k_fold(samples.xy, samples.values, model.covariance, model.mean, k=5, seed=1)
    path = tmp_path / "kfold.html"
    write_crossvalidation_report(path, cv=cv, ids=samples.ids, xy=samples.xy, model=model, crs_name="RD New")
    html = path.read_text(encoding="utf-8")
    assert embedded_data(html)["scheme"] == "k-fold (k = 5)"
    assert "<th>fold</th>" in html


def test_without_plotly_and_deterministic(zinc_model, loo_report, tmp_path, monkeypatch):
    samples, model = zinc_model
    cv, html = loo_report
    again = tmp_path / "again.html"
    write_crossvalidation_report(again, cv=cv, ids=samples.ids, xy=samples.xy, model=model,
                                 crs_name="Amersfoort / RD New")
    assert again.read_text(encoding="utf-8") == html
    monkeypatch.setitem(sys.modules, "plotly", None)  # makes "import plotly" raise ImportError
    plain = tmp_path / "plain.html"
    write_crossvalidation_report(plain, cv=cv, ids=samples.ids, xy=samples.xy, model=model,
                                 crs_name="Amersfoort / RD New")
    text = plain.read_text(encoding="utf-8")
    assert "plotly could not be imported" in text and text.count("Plot not drawn") == 4  # a log model: 4 plots
    assert "Plotly.newPlot" not in text
    assert embedded_data(text)["summary"] == embedded_data(html)["summary"]
    assert len(re.findall(r'<tr data-id="\d+">', text)) == 10


def test_mismatched_inputs_are_refused(zinc_model, loo_report, tmp_path):
    samples, model = zinc_model
    cv, _ = loo_report
    with pytest.raises(ReportError, match="155 samples but 154 ids"):
        write_crossvalidation_report(tmp_path / "x.html", cv=cv, ids=samples.ids[:-1], xy=samples.xy, model=model,
                                     crs_name="RD New")
    assert not list(tmp_path.iterdir())


def test_markup_in_field_name_stays_text(zinc_model, loo_report, tmp_path):
    samples, model = zinc_model
    cv, _ = loo_report
    field = 'zinc</script><!--<b onload="x">'
    path = tmp_path / "named.html"
    write_crossvalidation_report(path, cv=cv, ids=samples.ids, xy=samples.xy,
                                 model=dataclasses.replace(model, field=field), crs_name="RD New")
    html = path.read_text(encoding="utf-8")
    assert embedded_data(html)["field"] == field
    assert "<b onload" not in html and "<!--" not in html
    assert html.count("</script>") == html.count("<script")


def test_summary_in_zinc_units_for_the_log_model(loo_report, meuse):
    cv, html = loo_report
    data = embedded_data(html)
    # Published Meuse zinc in ppm (Rikken & Van Rijn 1993) against exp of the log-scale predictions, the
    # lognormal median (Aitchison & Brown 1957); RMSE by its definition.
    np.testing.assert_allclose(data["samples"]["observed_value"], meuse.zinc, rtol=1e-12)
    predicted = np.exp(np.asarray(data["samples"]["predicted"]))
    np.testing.assert_allclose(data["samples"]["predicted_value"], predicted, rtol=1e-12)
    assert data["summary"]["RMSE_ATTRIBUTE"] == pytest.approx(np.sqrt(np.mean((meuse.zinc - predicted) ** 2)),
                                                              rel=1e-12)
    row = re.search(r'<tr data-statistic="RMSE_ATTRIBUTE">(.*?)</tr>', html, re.S).group(1)
    assert "root mean squared error in zinc units" in row
    scatter = json.loads(re.search(SPEC_BLOCK.format("fc-plot-observed-predicted-values"), html, re.S).group(1))
    np.testing.assert_allclose(scatter["data"][1]["x"], predicted, rtol=1e-12)
    np.testing.assert_allclose(scatter["data"][1]["y"], meuse.zinc, rtol=1e-12)


def test_coverage_band_stops_at_100_percent():
    # Binomial standard error sqrt(p (1 - p) / n) (common practice for a proportion): with n = 5 the band
    # 0.95 +- 1.96 * 0.0975 reaches 1.14, a share no sample set can have.
    summary = {"ME": 0.0, "RMSE": 1.0, "MSDR": 1.0, "COVERAGE95": 0.95, "n": 5}
    rows = {row["key"]: row for row in summary_rows(summary, "zinc")}
    half = stats.norm.ppf(0.975) * np.sqrt(0.95 * 0.05 / 5)
    assert rows["COVERAGE95"]["band"] == [pytest.approx(0.95 - half), 1.0]
    assert rows["MSDR"]["band"][0] == 0.0  # 1 - 1.96 sqrt(2 / 5) is negative
    assert rows["ME"]["band"][0] < 0.0  # a mean error may be negative

