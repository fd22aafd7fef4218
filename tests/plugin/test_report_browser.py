"""The reports open in headless Chromium offline: plots drawn, no console message, no network request.

Screenshots are kept in ``test-artifacts/report-browser/`` (git-ignored) for a person to look at.
"""
from __future__ import annotations

import json
import os
import re
import signal
import subprocess
import tempfile
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from fieldcast.algorithms.predict.crossval import leave_one_out
from fieldcast.plugin.report.crossvalidation_report import write_crossvalidation_report
from fieldcast.plugin.report.fit_report import write_fit_report
from fieldcast.plugin.report.plotting import AMBER
from requirements_check import skip_unless_available
from test_report_fit import all_semivariograms, log_zinc_model

CHROMIUM = Path("/usr/bin/chromium")
ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts" / "report-browser"
BROWSER_TIMEOUT = 180

pytestmark = skip_unless_available(CHROMIUM.exists(), "Chromium is not installed at /usr/bin/chromium")


def run_chromium(url: str, workdir: Path, *extra: str) -> tuple[str, str]:
    """Run headless Chromium on ``url`` with a new empty profile; return its output and its log (stderr).

    Every host name resolves to nothing, so a request to the network fails instead of leaving the machine.
    """
    profile = tempfile.mkdtemp(prefix="profile-", dir=workdir)
    command = [str(CHROMIUM), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
               "--disable-background-networking", "--disable-component-update", "--disable-sync",
               f"--user-data-dir={profile}", "--host-resolver-rules=MAP * ~NOTFOUND", "--enable-logging=stderr",
               "--v=0", "--hide-scrollbars", "--virtual-time-budget=20000", *extra, url]
    process = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                               start_new_session=True)
    try:
        stdout, stderr = process.communicate(timeout=BROWSER_TIMEOUT)
    except subprocess.TimeoutExpired:
        os.killpg(process.pid, signal.SIGKILL)  # the browser and its helper processes only
        process.communicate()
        raise
    assert process.returncode == 0, stderr[-2000:]
    return stdout, stderr


def console_messages(log: str) -> list[str]:
    """Lines of the browser log that report a page console message or an uncaught exception."""
    return [line for line in log.splitlines() if ":CONSOLE" in line or "Uncaught" in line]


def page_requests(net_log: Path) -> list[str]:
    """URLs of network requests started on behalf of a page opened from a file.

    In Chromium's net log a page's requests carry a network isolation key naming the page's origin
    (``file://``); the browser's own background requests do not.
    """
    data = json.loads(net_log.read_text(encoding="utf-8"))
    start = data["constants"]["logEventTypes"]["URL_REQUEST_START_JOB"]
    return [event["params"]["url"] for event in data["events"]
            if event["type"] == start and "file://" in event["params"].get("network_isolation_key", "")]


def open_offline(page: Path, workdir: Path) -> tuple[str, str, list[str]]:
    """Open ``page``; return the DOM after its scripts ran, the browser log and the page's network requests."""
    net_log = workdir / f"{page.stem}-net.json"
    dom_file = workdir / f"{page.stem}-dom.html"
    dom, log = run_chromium(page.as_uri(), workdir, f"--log-net-log={net_log}", "--dump-dom")
    dom_file.write_text(dom, encoding="utf-8")
    return dom, log, page_requests(net_log)


def screenshot(page: Path, workdir: Path, height: int) -> Path:
    """A full-width screenshot of ``page`` saved under test-artifacts/report-browser/."""
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    target = ARTIFACTS / f"{page.stem}.png"
    run_chromium(page.as_uri(), workdir, f"--window-size=1280,{height}", f"--screenshot={target}")
    return target


def colour_pixels(path: Path, colour: str) -> int:
    """Number of pixels of exactly ``colour`` ("#rrggbb") in a PNG."""
    image = Image.open(path).convert("RGB")
    target = np.array([int(colour[i:i + 2], 16) for i in (1, 3, 5)])
    return int(np.count_nonzero(np.all(np.asarray(image) == target, axis=-1)))


def static_network_references(html: str) -> list[str]:
    """http(s) URLs the markup itself would load: src/href attributes and CSS url() or @import.

    Script bodies are left out: plotly's JavaScript holds URLs in comments and strings that are not loaded.
    """
    markup = re.sub(r"<script\b[^>]*>.*?</script>", "", html, flags=re.S | re.I)
    pattern = r"""(?:src|href)\s*=\s*["']?\s*((?:https?:)?//[^"'\s>]+)|url\(\s*["']?((?:https?:)?//[^)"']+)|@import"""
    return [match.group(0) for match in re.finditer(pattern, markup, re.I)]


def plot_divs(dom: str) -> dict[str, str]:
    """Per plot div id of the rendered page, the markup from that div up to the next plot div (or the end)."""
    starts = [(match.start(), match.group(1)) for match in re.finditer(r'<div[^>]*\bid="(fc-plot-[\w-]+)"', dom)]
    ends = [start for start, _ in starts[1:]] + [len(dom)]
    return {div_id: dom[start:end] for (start, div_id), end in zip(starts, ends)}


@pytest.fixture(scope="module")
def reports(meuse, tmp_path_factory) -> dict[str, Path]:
    """Fit and leave-one-out reports of log zinc on the Meuse samples."""
    folder = tmp_path_factory.mktemp("browser")
    samples, fit, model = log_zinc_model(meuse, kernel="auto", anisotropy=True)
    paths = {"fit": folder / "fit-report.html", "crossvalidation": folder / "crossvalidation-report.html"}
    write_fit_report(paths["fit"], samples=samples, fit=fit, model=model, variograms=all_semivariograms(samples),
                     crs_name="Amersfoort / RD New")
    cv = leave_one_out(samples.xy, samples.values, fit.covariance, fit.mean)
    write_crossvalidation_report(paths["crossvalidation"], cv=cv, ids=samples.ids, xy=samples.xy, model=model,
                                 crs_name="Amersfoort / RD New")
    return paths


def test_checks_catch_console_errors_and_requests(tmp_path):
    page = tmp_path / "probe.html"
    page.write_text(
        '<!DOCTYPE html><html><body><img src="http://example.com/a.png"><script>console.error("probe");'
        'fetch("https://example.org/b.json").catch(function () {}); throw new Error("boom");</script></body></html>',
        encoding="utf-8")
    _, log, requests = open_offline(page, tmp_path)
    messages = console_messages(log)
    assert any('"probe"' in line for line in messages)
    assert any("Uncaught Error: boom" in line for line in messages)
    assert sorted(requests) == ["http://example.com/a.png", "https://example.org/b.json"]
    assert len(static_network_references(page.read_text(encoding="utf-8"))) == 1


@pytest.mark.parametrize("name, plots, height", [("fit", 4, 6200), ("crossvalidation", 4, 4500)])
def test_report_draws_its_plots_offline(reports, tmp_path, name, plots, height):
    page = reports[name]
    assert static_network_references(page.read_text(encoding="utf-8")) == []
    dom, log, requests = open_offline(page, tmp_path)
    assert console_messages(log) == []
    assert requests == []
    assert f'data-plots-drawn="{plots}"' in dom
    assert dom.count("js-plotly-plot") >= plots
    assert len(plot_divs(dom)) == plots
    assert all('class="main-svg"' in inside for inside in plot_divs(dom).values())  # each div holds its SVG
    image = screenshot(page, tmp_path, height)
    assert image.stat().st_size > 50_000
    # Amber is used only for plotted data (semivariogram points, residual bars), never by the page itself.
    assert colour_pixels(image, AMBER) > 500
