"""The plots of the cross-validation report: observed against predicted, residual map, residual histogram."""
from __future__ import annotations

from types import SimpleNamespace

import numpy as np

from .plotting import AMBER, BRICK, INK, RESIDUAL_SCALE, SLATE, TEAL, Plot, as_plot, base_layout
from .statistics import standard_normal_density

RESIDUAL_COLOUR_LIMIT = 3.0
"""Standardised residuals at or beyond +-3 get the end colours of the map scale (at least)."""


def observed_predicted_plot(plotly: SimpleNamespace, observed: np.ndarray, predicted: np.ndarray,
                            ids: list[str], label: str, plot_id: str = "fc-plot-observed-predicted") -> Plot:
    """Observed (vertical) against cross-validated prediction (horizontal) with the 1:1 line, in the page as
    ``plot_id``."""
    low = float(min(observed.min(), predicted.min()))
    high = float(max(observed.max(), predicted.max()))
    pad = 0.04 * (high - low if high > low else 1.0)
    limits = [low - pad, high + pad]
    traces = [
        plotly.go.Scatter(x=limits, y=limits, mode="lines", name="1:1 line", line={"color": SLATE, "dash": "dash"},
                          hoverinfo="skip"),
        plotly.go.Scatter(x=predicted.tolist(), y=observed.tolist(), mode="markers", name="samples", text=ids,
                          marker={"size": 7, "color": TEAL, "opacity": 0.8, "line": {"color": INK, "width": 0.5}},
                          hovertemplate="id %{text}<br>predicted %{x:.4g}<br>observed %{y:.4g}<extra></extra>"),
    ]
    layout = base_layout(xaxis={"title": {"text": f"predicted ({label})"}, "range": limits, "constrain": "domain"},
                         yaxis={"title": {"text": f"observed ({label})"}, "range": limits, "scaleanchor": "x",
                                "scaleratio": 1},
                         legend={"orientation": "h", "x": 0.5, "xanchor": "center", "y": 1.02, "yanchor": "bottom"})
    return as_plot(plotly.go.Figure(traces, layout), plot_id, height=520)


def residual_map_plot(plotly: SimpleNamespace, xy: np.ndarray, standardized: np.ndarray, ids: list[str],
                      distance_units: str) -> Plot:
    """Samples coloured by standardised residual (diverging, centred on 0) and sized by its magnitude."""
    limit = max(RESIDUAL_COLOUR_LIMIT, float(np.max(np.abs(standardized))))
    sizes = (5.0 + 4.0 * np.minimum(np.abs(standardized), 4.0)).tolist()
    points = plotly.go.Scatter(
        x=xy[:, 0].tolist(), y=xy[:, 1].tolist(), mode="markers", name="samples", text=ids,
        customdata=standardized.tolist(),
        hovertemplate="id %{text}<br>standardised residual %{customdata:.3g}<extra></extra>",
        marker={"size": sizes, "color": standardized.tolist(), "colorscale": RESIDUAL_SCALE, "cmin": -limit,
                "cmax": limit, "line": {"color": INK, "width": 0.5},
                "colorbar": {"title": {"text": "standardised residual", "side": "right"}, "thickness": 14}})
    layout = base_layout(xaxis={"title": {"text": f"easting ({distance_units})"}},
                         yaxis={"title": {"text": f"northing ({distance_units})"}, "scaleanchor": "x",
                                "scaleratio": 1},
                         showlegend=False)
    return as_plot(plotly.go.Figure(points, layout), "fc-plot-residual-map", height=560)


def standardized_histogram_plot(plotly: SimpleNamespace, histogram: dict[str, list[float]]) -> Plot:
    """Density histogram of the standardised residuals with the standard normal density over it."""
    edges = np.asarray(histogram["edges"])
    z = np.linspace(edges[0], edges[-1], 161)
    traces = [
        plotly.go.Bar(x=(0.5 * (edges[:-1] + edges[1:])).tolist(), y=histogram["density"],
                      width=np.diff(edges).tolist(), name="standardised residuals",
                      marker={"color": AMBER, "line": {"color": "#ffffff", "width": 1}},
                      customdata=histogram["counts"],
                      hovertemplate="%{x:.2f}: %{customdata} samples<extra></extra>"),
        plotly.go.Scatter(x=z.tolist(), y=standard_normal_density(z).tolist(), mode="lines",
                          name="standard normal density", line={"color": BRICK, "width": 2.5}, hoverinfo="skip"),
    ]
    layout = base_layout(xaxis={"title": {"text": "standardised residual"}},
                         yaxis={"title": {"text": "density"}}, bargap=0, legend={"x": 0.02, "y": 0.98})
    return as_plot(plotly.go.Figure(traces, layout), "fc-plot-residual-histogram", height=380)
