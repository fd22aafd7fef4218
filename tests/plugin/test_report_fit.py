"""The fit report on the Meuse zinc data: the page carries the engine's numbers and the model choice."""
from __future__ import annotations

import dataclasses
import json
import re
import sys

import numpy as np
import pytest
from scipy import stats

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.fit.fitting import fit_model
from fieldcast.algorithms.fit.likelihood import jitter_message, log_likelihood
from fieldcast.algorithms.fit.options import AUTO_FAMILIES
from fieldcast.algorithms.fit.variogram import directional_semivariograms, empirical_semivariogram
from fieldcast.algorithms.io.model_file import ModelDocument
from fieldcast.algorithms.io.samples import merge_coincident
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.crossval import leave_one_out
from fieldcast.plugin.report.fit_figures import pair_marker_sizes
from fieldcast.plugin.report.fit_report import write_fit_report
from fieldcast.plugin.report.page import ReportError, format_number

DATA_BLOCK = re.compile(r'<script type="application/json" id="fieldcast-data">(.*?)</script>', re.S)


def embedded_data(html: str) -> dict:
    """The JSON block ``fieldcast-data`` of a report page."""
    return json.loads(DATA_BLOCK.search(html).group(1))


def plot_spec(html: str, div_id: str) -> dict:
    """The plotly figure (``data`` and ``layout``) drawn into the div ``div_id`` of a report page."""
    return json.loads(re.search(f'<script type="application/json" id="{div_id}-spec">(.*?)</script>', html,
                                re.S).group(1))


@dataclasses.dataclass
class FitCase:
    """Everything the fit report is built from, and the arguments passed to it."""

    samples: object
    fit: object
    model: ModelDocument
    variograms: list
    loo_rmse: list
    arguments: dict


def log_zinc_model(meuse, **fit_options) -> tuple:
    """Meuse samples with log zinc values, the REML fit with ``fit_options`` and its model document.

    Shared by the report test modules.
    """
    transform = Transform("log")
    samples = merge_coincident(meuse.xy, transform.forward(meuse.zinc), ids=meuse.ids)
    fit = fit_model(samples.xy, samples.values, **fit_options)
    model = ModelDocument(fit.covariance, fit.mean, fit.coefficients, transform, "EPSG:28992", "metre", "zinc",
                          fit.summary())
    return samples, fit, model


def all_semivariograms(samples) -> list:
    """The omnidirectional semivariogram and those at 0, 45, 90 and 135 degrees, engine defaults."""
    xy, values = samples.xy, samples.values
    return [empirical_semivariogram(xy, values), *directional_semivariograms(xy, values)]


@pytest.fixture(scope="module")
def zinc_case(meuse) -> FitCase:
    """Log zinc of the Meuse samples, every family of kernel="auto" fitted by REML."""
    samples, fit, model = log_zinc_model(meuse, kernel="auto", anisotropy=True)
    variograms = all_semivariograms(samples)
    loo_rmse = [leave_one_out(samples.xy, samples.values, c.covariance, fit.mean).summary()["RMSE"]
                for c in fit.candidates]
    arguments = dict(samples=samples, fit=fit, model=model, variograms=variograms, crs_name="Amersfoort / RD New",
                     skipped={"value is NULL or not a number": 2}, candidate_loo_rmse=loo_rmse)
    return FitCase(samples, fit, model, variograms, loo_rmse, arguments)


@pytest.fixture(scope="module")
def zinc_report(zinc_case, tmp_path_factory) -> str:
    """The HTML text of the fit report."""
    path = tmp_path_factory.mktemp("fit-report") / "fit.html"
    write_fit_report(path, **zinc_case.arguments)
    return path.read_text(encoding="utf-8")


def test_semivariograms_in_page_equal_engine_and_classical_estimator(zinc_case, zinc_report, meuse):
    data = embedded_data(zinc_report)
    omni, *directional = data["variograms"]
    assert omni["azimuth"] is None
    assert [v["azimuth"] for v in directional] == [0.0, 45.0, 90.0, 135.0]
    assert all(v["tolerance"] == 22.5 for v in directional)
    # Fresh engine runs over the same lags give the same numbers.
    n_lags = len(omni["lag_edges"]) - 1
    fresh = [empirical_semivariogram(zinc_case.samples.xy, zinc_case.samples.values, n_lags=n_lags,
                                     cutoff=omni["cutoff"]),
             *directional_semivariograms(zinc_case.samples.xy, zinc_case.samples.values, n_lags=n_lags,
                                         cutoff=omni["cutoff"])]
    for record, engine in zip(data["variograms"], fresh):
        np.testing.assert_array_equal(record["lag_edges"], engine.lag_edges)
        np.testing.assert_array_equal(record["pairs"], engine.pairs)
        np.testing.assert_allclose(record["distance"], engine.distance, rtol=1e-15)
        np.testing.assert_allclose(record["gamma"], engine.gamma, rtol=1e-15)
    # Classical estimator written out over all pairs (Matheron 1962; Cressie 1993, Statistics for Spatial
    # Data, eq. 2.4.2): gamma_j = sum (z_i - z_k)^2 / (2 N_j) over pairs with distance in (e_j, e_j+1].
    z = np.log(meuse.zinc)
    i, k = np.triu_indices(len(z), 1)
    h = np.hypot(*(meuse.xy[i] - meuse.xy[k]).T)
    edges = np.asarray(omni["lag_edges"])
    for j in range(n_lags):
        inside = (h > edges[j]) & (h <= edges[j + 1])
        assert omni["pairs"][j] == np.count_nonzero(inside)
        assert omni["gamma"][j] == pytest.approx(np.sum((z[i] - z[k])[inside] ** 2) / (2 * inside.sum()), rel=1e-12)
    # The lag table on the page shows the same values.
    assert f'<td class="fc-num">{format_number(omni["gamma"][0])}</td>' in zinc_report


def test_marker_sizes_grow_with_the_pair_counts(zinc_report):
    # Each empirical point is sized by its number of pairs (larger samples of pairs, more reliable estimates;
    # common practice): sizes rise strictly with the counts embedded in the page, empty lags left out.
    data = embedded_data(zinc_report)
    figures = [plot_spec(zinc_report, "fc-plot-variogram")["data"][:1],
               plot_spec(zinc_report, "fc-plot-directional")["data"][::2]]
    points = [trace for traces in figures for trace in traces]
    assert len(points) == len(data["variograms"]) == 5
    for trace, record in zip(points, data["variograms"]):
        pairs = np.asarray(record["pairs"])
        assert trace["customdata"] == pairs[pairs > 0].tolist()
        order = np.argsort(trace["customdata"], kind="stable")
        counts, sizes = np.asarray(trace["customdata"])[order], np.asarray(trace["marker"]["size"])[order]
        assert np.all(np.diff(sizes)[np.diff(counts) > 0] > 0)
        assert np.all(np.diff(sizes)[np.diff(counts) == 0] == 0)
        assert len(set(counts)) > 3  # the check compares several different counts


def test_sample_map_ellipse_has_the_effective_ranges_along_the_azimuth(zinc_case, zinc_report):
    structure = zinc_case.fit.covariance.structures[0]
    assert len(zinc_case.fit.covariance.structures) == 1 and structure.ratio < 0.9  # an anisotropic fit
    traces = plot_spec(zinc_report, "fc-plot-sample-map")["data"]
    outline = next(trace for trace in traces if trace["name"].startswith("effective range"))
    xy = zinc_case.samples.xy
    centre = 0.5 * (xy.min(axis=0) + xy.max(axis=0))
    # Drawn full size unless that exceeds half the samples' extent (the legend then gives the scale).
    scale = min(1.0, 0.5 * float(np.max(xy.max(axis=0) - xy.min(axis=0))) / structure.effective_range)
    assert (scale < 1.0) == ("drawn at 1:" in outline["name"])
    dx, dy = np.asarray(outline["x"]) - centre[0], np.asarray(outline["y"]) - centre[1]
    distance = np.hypot(dx, dy)
    farthest, nearest = int(np.argmax(distance)), int(np.argmin(distance))
    assert distance[farthest] == pytest.approx(scale * structure.effective_range, rel=1e-9)
    assert distance[nearest] == pytest.approx(scale * structure.effective_range * structure.ratio, rel=1e-3)
    # Bearing of the farthest point, degrees clockwise from grid north (atan2 of easting over northing),
    # is the azimuth (modulo 180: the ellipse is symmetric); the nearest point lies at right angles to it.
    bearing = np.degrees(np.arctan2(dx[farthest], dy[farthest])) % 180.0
    assert (bearing - structure.azimuth + 90.0) % 180.0 - 90.0 == pytest.approx(0.0, abs=1e-6)
    across = np.degrees(np.arctan2(dx[nearest], dy[nearest])) % 180.0
    assert (across - structure.azimuth) % 180.0 == pytest.approx(90.0, abs=5.0)


def test_candidate_table_lists_every_family_with_its_aic(zinc_case, zinc_report):
    candidates = embedded_data(zinc_report)["candidates"]
    fit = zinc_case.fit
    assert [c["family"] for c in candidates] == [c.family for c in fit.candidates]
    assert {c["family"] for c in candidates} == set(AUTO_FAMILIES)
    assert {c["anisotropy"] for c in candidates} == {False, True}
    for row, candidate, rmse in zip(candidates, fit.candidates, zinc_case.loo_rmse):
        assert row["aic"] == candidate.aic
        assert row["log_likelihood"] == candidate.log_likelihood
        assert row["loo_rmse"] == rmse
        # AIC = 2k - 2 log L (Akaike 1974); k = 3 (isotropic: nugget, sill, range) or 5 (plus azimuth, ratio)
        # covariance parameters under REML, whose criteria exclude the mean coefficients (fitting.py docstring).
        k = 5 if candidate.anisotropy else 3
        assert row["aic"] == pytest.approx(2 * k - 2 * row["log_likelihood"], rel=1e-12)
        # The log-likelihood is that of the engine's exact REML evaluation of the candidate model.
        assert row["log_likelihood"] == pytest.approx(
            log_likelihood(zinc_case.samples.xy, zinc_case.samples.values, candidate.covariance, fit.mean, "reml"),
            rel=1e-9)
    rows = re.findall(r'<tr class="(fc-chosen|)" data-family="(\w+)">', zinc_report)
    assert [family for _, family in rows] == [c.family for c in fit.candidates]


def test_a_reml_candidate_table_says_its_criteria_do_not_compare_trends(zinc_report):
    assert "REML criteria of different trends do not" in zinc_report and "METHOD ml" in zinc_report


def test_a_direction_without_filled_lags_gets_no_markers():
    # Three or four samples leave some directions without a pair in any lag: nothing to draw, no failure.
    assert pair_marker_sizes(np.array([])) == []


def test_chosen_model_is_lowest_aic(zinc_case, zinc_report):
    candidates = embedded_data(zinc_report)["candidates"]
    chosen = [c for c in candidates if c["chosen"]]
    assert len(chosen) == 1
    assert chosen[0]["aic"] == min(c["aic"] for c in candidates) == zinc_case.fit.aic
    marked = re.findall(r'<tr class="fc-chosen" data-family="(\w+)">', zinc_report)
    assert marked == [chosen[0]["family"]]


def test_data_section(zinc_case, zinc_report, meuse):
    data = embedded_data(zinc_report)["data"]
    assert data["n_used"] == 155 and data["n_read"] == 155
    assert data["merged_groups"] == 0 and data["merged_points"] == 0
    assert data["skipped"] == [{"reason": "value is NULL or not a number", "count": 2}]
    assert "left out: value is NULL or not a number" in zinc_report
    statistics = data["statistics"]
    z = np.log(meuse.zinc)
    # Reference library: scipy.stats.skew with bias=True is the moment coefficient g1.
    assert statistics["skewness"] == pytest.approx(stats.skew(z, bias=True), rel=1e-12)
    assert statistics["std"] == pytest.approx(np.std(z, ddof=1), rel=1e-12)
    assert statistics["median"] == pytest.approx(np.log(326.0), rel=1e-12)  # median zinc 326 ppm (from memory)
    assert sum(data["histogram"]["counts"]) == 155
    assert "Amersfoort / RD New" in zinc_report and "metre" in zinc_report
    # Back-transformed column: median 326 and maximum 1839 ppm, as in tests/test_meuse_data.py.
    assert '<th>median</th><td class="fc-num">5.787</td><td class="fc-num">326</td>' in zinc_report


def test_parameters_and_cautions_are_shown(zinc_case, zinc_report):
    structure = zinc_case.fit.covariance.structures[0]
    assert format_number(structure.effective_range) in zinc_report
    assert format_number(structure.effective_range * structure.ratio) in zinc_report
    assert "effective range, major axis" in zinc_report
    for phrase in ("model-based estimate", "stationary field", "Read the variance",
                   "local regulations and licensed professional judgement"):
        assert phrase in zinc_report


def test_warnings_are_listed_with_headings(zinc_case, tmp_path):
    fit = dataclasses.replace(zinc_case.fit, warnings=[jitter_message(1e-6), *zinc_case.fit.warnings],
                              likelihood="nearest-neighbour approximation")
    path = tmp_path / "warned.html"
    write_fit_report(path, **{**zinc_case.arguments, "fit": fit})
    html = path.read_text(encoding="utf-8")
    assert "<strong>Numerical jitter added.</strong>" in html
    assert "<strong>Approximation used.</strong>" in html
    assert embedded_data(html)["warnings"][0] == jitter_message(1e-6)


def test_report_is_deterministic_and_written_atomically(zinc_case, zinc_report, tmp_path):
    first, second = tmp_path / "a.html", tmp_path / "b.html"
    write_fit_report(first, **zinc_case.arguments)
    write_fit_report(second, **zinc_case.arguments)
    assert first.read_bytes() == second.read_bytes() == zinc_report.encode("utf-8")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.html", "b.html"]
    with pytest.raises(FieldcastError, match="does not exist"):
        write_fit_report(tmp_path / "missing" / "fit.html", **zinc_case.arguments)


def test_failed_render_leaves_previous_report_untouched(zinc_case, tmp_path):
    path = tmp_path / "fit.html"
    path.write_text("previous", encoding="utf-8")
    with pytest.raises(ReportError, match="one omnidirectional"):
        write_fit_report(path, **{**zinc_case.arguments, "variograms": zinc_case.variograms[1:]})
    assert path.read_text(encoding="utf-8") == "previous"
    assert [p.name for p in tmp_path.iterdir()] == ["fit.html"]


def test_without_plotly_the_tables_remain(zinc_case, zinc_report, tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "plotly", None)  # makes "import plotly" raise ImportError
    path = tmp_path / "plain.html"
    write_fit_report(path, **zinc_case.arguments)
    html = path.read_text(encoding="utf-8")
    assert "plotly could not be imported" in html
    assert "Plotly.newPlot" not in html and 'class="fc-plot"' not in html
    assert html.count("Plot not drawn") == 4
    assert embedded_data(html)["variograms"] == embedded_data(zinc_report)["variograms"]
    assert embedded_data(html)["candidates"] == embedded_data(zinc_report)["candidates"]
    assert html.count('data-family="') == len(zinc_case.fit.candidates)
    assert "Semivariogram values by lag" in html
    assert len(html) < len(zinc_report) / 20


def test_nested_model_with_trend_and_text_ids(meuse, tmp_path):
    transform = Transform("log", 10.0)
    samples = merge_coincident(meuse.xy, transform.forward(meuse.zinc), ids=np.array([f"S{i}" for i in meuse.ids]))
    fit = fit_model(samples.xy, samples.values, kernel="exponential", anisotropy=False, nested=True, mean="linear")
    model = ModelDocument(fit.covariance, fit.mean, fit.coefficients, transform, "EPSG:28992", "metre", "zinc",
                          fit.summary())
    residuals = samples.values - fit.mean.design(samples.xy) @ fit.coefficients
    path = tmp_path / "nested.html"
    write_fit_report(path, samples=samples, fit=fit, model=model, crs_name="RD New",
                     variograms=[empirical_semivariogram(samples.xy, residuals)])
    html = path.read_text(encoding="utf-8")
    assert "structure 2: partial sill" in html and "natural log of (zinc + 10)" in html
    assert [row["words"] for row in embedded_data(html)["mean"]["coefficients"]] == ["intercept", "u", "v"]
    assert "trend residuals" in html
    assert "fc-plot-directional" not in html and "Plot not drawn" not in html
    assert '"S1"' in html  # sample ids label the points of the sample map
    assert [c["loo_rmse"] for c in embedded_data(html)["candidates"]] == [None]
