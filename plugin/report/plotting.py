"""Access to plotly, the Fieldcast plot style, and figures turned into page-ready specs.

plotly is optional: :func:`load_plotly` returns None when it cannot be
imported and the reports then show their tables with a note instead of the
plots. Figures are built with ``plotly.graph_objects`` (which checks every
attribute) and handed to the page as JSON specs; the page draws them with
``Plotly.newPlot`` into divs whose ids are fixed by the report, never random.

The page embeds plotly.js's minified basic bundle (scatter, bar and pie traces),
shipped in ``vendor/`` with its licence (see ``vendor/README.md``), instead of the
full unminified plotly.js of the Python package: a report stays one offline file
of about 1 MB. Every trace the reports draw must be one of :data:`BUNDLED_TRACES`.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from types import SimpleNamespace
from typing import Any

from .page import script_json

PLOTLY_BUNDLE = Path(__file__).resolve().parent / "vendor" / "plotly-basic.min.js"
"""plotly.js basic bundle, minified (npm package plotly.js-basic-dist-min, MIT licence)."""
BUNDLED_TRACES = frozenset({"scatter", "bar", "pie"})
"""Trace types the basic bundle draws (its README); the reports use no other."""

INK = "#22313f"
TEAL = "#17706e"
AMBER = "#c7831a"
BRICK = "#a8432a"
SLATE = "#6b7a88"
GRID = "#e4e1d8"
PANEL = "#fbfaf6"

VALUE_SCALE = [[0.0, "#f1e6c0"], [0.5, "#4f9f97"], [1.0, "#1d3f5c"]]
"""Sequential colour scale for sample values: sand to teal to deep blue."""

RESIDUAL_SCALE = [[0.0, "#2d5f8b"], [0.5, "#f4f1ea"], [1.0, "#a8432a"]]
"""Diverging colour scale for standardised residuals: blue (over-predicted) to brick (under-predicted)."""

AXIS_STYLE = {"gridcolor": GRID, "zerolinecolor": GRID, "linecolor": SLATE, "showline": True,
              "ticks": "outside", "tickcolor": SLATE}
"""Look of every axis."""

PLOT_CONFIG = {"displaylogo": False, "responsive": True, "showLink": False, "showSendToCloud": False}
"""Options passed to ``Plotly.newPlot`` for every figure."""

MISSING_PLOTLY = (
    "Plots are not drawn because the Python package plotly could not be imported. "
    "The tables hold every number; install plotly (it ships with QGIS) to get the plots."
)


def load_plotly() -> SimpleNamespace | None:
    """The plotly modules the reports use, or None when plotly cannot be imported.

    Imported on each call (cheap after the first), so a test that hides
    plotly sees the fallback without reloading this module.
    """
    try:
        from plotly import graph_objects, subplots
    except ImportError:
        return None
    return SimpleNamespace(go=graph_objects, subplots=subplots, javascript=bundled_javascript)


def bundled_javascript() -> str:
    """The text of the vendored plotly.js basic bundle, embedded once per page."""
    return PLOTLY_BUNDLE.read_text(encoding="utf-8")


@dataclass(frozen=True)
class Plot:
    """A figure ready for the page.

    Attributes
    ----------
    div_id : str
        Fixed id of the div the figure is drawn into; the spec sits in a
        ``<script type="application/json">`` element with id ``div_id + "-spec"``.
    spec : str
        JSON text ``{"data": [...], "layout": {...}}`` for ``Plotly.newPlot``.
    height : int
        Height of the plot in pixels.
    """

    div_id: str
    spec: str
    height: int


def base_layout(**overrides: Any) -> dict[str, Any]:
    """Layout shared by every Fieldcast figure, updated with ``overrides``.

    ``xaxis`` and ``yaxis`` overrides are merged into :data:`AXIS_STYLE`.
    """
    layout: dict[str, Any] = {
        "template": "none",
        "font": {"family": "system-ui, 'Segoe UI', Helvetica, Arial, sans-serif", "size": 13, "color": INK},
        "paper_bgcolor": "#ffffff",
        "plot_bgcolor": PANEL,
        "margin": {"l": 70, "r": 30, "t": 40, "b": 60},
        "legend": {"bgcolor": "rgba(255,255,255,0.85)", "bordercolor": GRID, "borderwidth": 1},
        "hoverlabel": {"bgcolor": "#ffffff", "bordercolor": INK},
    }
    for axis in ("xaxis", "yaxis"):
        layout[axis] = {**AXIS_STYLE, **overrides.pop(axis, {})}
    layout.update(overrides)
    return layout


def as_plot(figure: Any, div_id: str, height: int = 420) -> Plot:
    """Turn a plotly figure into a :class:`Plot` drawn into the div ``div_id``."""
    figure.update_layout(height=height)
    data = figure.to_plotly_json()
    return Plot(div_id, script_json({"data": data["data"], "layout": data["layout"]}), height)


def plotly_context(plotly: SimpleNamespace | None) -> dict[str, Any]:
    """Template variables about plotting: its JavaScript (once per page) and the newPlot options."""
    if plotly is None:
        return {"plotly_javascript": "", "plot_config": "{}", "missing_plotly": MISSING_PLOTLY}
    return {"plotly_javascript": plotly.javascript(), "plot_config": script_json(PLOT_CONFIG), "missing_plotly": ""}
