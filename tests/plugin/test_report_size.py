"""Reports stay small single offline files: the minified plotly.js basic bundle is embedded, nothing is fetched.

Reports: fit and leave-one-out reports of log zinc on the published Meuse samples (tests/data/README.md),
built by the fixture of test_report_browser.py. Whether the plots draw is checked there, in headless Chromium.
"""
from __future__ import annotations

import json
import re

import pytest

from fieldcast.plugin.report.plotting import BUNDLED_TRACES, PLOTLY_BUNDLE
from test_report_browser import reports, static_network_references  # noqa: F401 - fixture

SIZE_LIMIT = 2_000_000
"""Largest report accepted, in bytes (issue 11: the unminified full plotly.js made reports of 8.7 MB)."""
PLOT_SPEC = re.compile(r'<script type="application/json" id="(fc-plot-[\w-]+)-spec">(.*?)</script>', re.S)
SCRIPT_SRC = re.compile(r"<script\b[^>]*\bsrc\s*=", re.I)


@pytest.mark.parametrize("name", ["fit", "crossvalidation"])
def test_report_is_one_small_offline_file(reports, name):  # noqa: F811 - fixture
    html = reports[name].read_text(encoding="utf-8")
    assert reports[name].stat().st_size < SIZE_LIMIT
    assert html.count(PLOTLY_BUNDLE.read_text(encoding="utf-8")) == 1  # embedded once, unchanged
    assert SCRIPT_SRC.search(html) is None
    assert static_network_references(html) == []


@pytest.mark.parametrize("name", ["fit", "crossvalidation"])
def test_every_plotted_trace_is_in_the_bundle(reports, name):  # noqa: F811 - fixture
    specs = PLOT_SPEC.findall(reports[name].read_text(encoding="utf-8"))
    assert len(specs) >= 3
    types = {trace.get("type") for _, spec in specs for trace in json.loads(spec)["data"]}
    assert types <= BUNDLED_TRACES, types


def test_bundle_is_the_minified_basic_build_with_its_licence():
    header = PLOTLY_BUNDLE.read_text(encoding="utf-8")[:200]
    assert "plotly.js (basic - minified) v2.6.3" in header
    licence = (PLOTLY_BUNDLE.parent / "LICENSE-plotly.js").read_text(encoding="utf-8")
    assert licence.startswith("The MIT License") and "Plotly, Inc" in licence
