"""The plots of the fit report: attribute histogram, semivariograms and the sample map.

Each function takes a loaded plotly (see :func:`.plotting.load_plotly`) and
plain numbers, and returns a :class:`.plotting.Plot`.
"""
from __future__ import annotations

import math
from types import SimpleNamespace
from typing import Any

import numpy as np

from .model_tables import model_curve, range_ellipse
from .plotting import AMBER, AXIS_STYLE, BRICK, INK, TEAL, VALUE_SCALE, Plot, as_plot, base_layout

LARGEST_MARKER = 22
SMALLEST_MARKER = 5
ELLIPSE_SHARE = 0.5
"""Largest semi-major axis drawn on the sample map, as a share of the samples' extent."""


def histogram_plot(plotly: SimpleNamespace, histogram: dict[str, list[float]], label: str) -> Plot:
    """Bars of the sample counts per bin of the (transformed) attribute."""
    edges = np.asarray(histogram["edges"])
    bars = plotly.go.Bar(x=(0.5 * (edges[:-1] + edges[1:])).tolist(), y=histogram["counts"],
                         width=np.diff(edges).tolist(), name="samples",
                         marker={"color": TEAL, "line": {"color": "#ffffff", "width": 1}},
                         hovertemplate="%{x:.4g}: %{y} samples<extra></extra>")
    layout = base_layout(xaxis={"title": {"text": label}}, yaxis={"title": {"text": "number of samples"}},
                         bargap=0, showlegend=False)
    return as_plot(plotly.go.Figure(bars, layout), "fc-plot-histogram", height=340)


def declustered_histogram_plot(plotly: SimpleNamespace, histogram: dict[str, list[float]], label: str) -> Plot:
    """Side-by-side bars of the share of samples per bin, unweighted and with the declustering weights."""
    edges = np.asarray(histogram["edges"])
    centres = (0.5 * (edges[:-1] + edges[1:])).tolist()
    bars = [plotly.go.Bar(x=centres, y=histogram[key], name=name, marker={"color": colour},
                          hovertemplate="%{x:.4g}: %{y:.3f}<extra>" + name + "</extra>")
            for key, name, colour in (("raw", "raw", TEAL), ("declustered", "declustered", AMBER))]
    layout = base_layout(xaxis={"title": {"text": label}}, yaxis={"title": {"text": "share of the samples"}},
                         barmode="group", showlegend=True)
    return as_plot(plotly.go.Figure(bars, layout), "fc-plot-declustered", height=340)


def pair_marker_sizes(pairs: np.ndarray) -> list[float]:
    """Marker diameters in pixels growing with the square root of the pair count (none for no lags)."""
    pairs = np.asarray(pairs, dtype=float)
    largest = max(float(pairs.max(initial=0.0)), 1.0)
    return (SMALLEST_MARKER + (LARGEST_MARKER - SMALLEST_MARKER) * np.sqrt(pairs / largest)).tolist()


def variogram_traces(plotly: SimpleNamespace, variogram: Any, covariance: Any, show_legend: bool) -> list[Any]:
    """Empirical points (sized by pairs; empty lags left out) and the model curve for one direction."""
    filled = np.asarray(variogram.pairs) > 0
    points = plotly.go.Scatter(
        x=np.asarray(variogram.distance)[filled].tolist(), y=np.asarray(variogram.gamma)[filled].tolist(),
        mode="markers", name="empirical", legendgroup="empirical", showlegend=show_legend,
        marker={"size": pair_marker_sizes(np.asarray(variogram.pairs)[filled]), "color": AMBER, "opacity": 1,
                "line": {"color": INK, "width": 1}},
        customdata=np.asarray(variogram.pairs)[filled].tolist(),
        hovertemplate="distance %{x:.4g}<br>semivariance %{y:.4g}<br>%{customdata} pairs<extra></extra>")
    curve = model_curve(covariance, float(variogram.cutoff), variogram.azimuth)
    line = plotly.go.Scatter(x=curve["distance"], y=curve["gamma"], mode="lines", name="fitted model",
                             legendgroup="model", showlegend=show_legend, line={"color": TEAL, "width": 2.5},
                             hovertemplate="distance %{x:.4g}<br>model %{y:.4g}<extra></extra>")
    return [points, line]


def gamma_ceiling(variograms: list[Any], covariance: Any) -> float:
    """Top of the semivariance axis: 10% above the largest estimate or the sill."""
    estimates = [float(np.nanmax(v.gamma)) for v in variograms if np.any(np.asarray(v.pairs) > 0)]
    return 1.1 * max(estimates + [float(covariance.sill)])


def omnidirectional_plot(plotly: SimpleNamespace, variogram: Any, covariance: Any, distance_units: str,
                         variance_unit: str) -> Plot:
    """The omnidirectional semivariogram with the direction-averaged model and the sill."""
    figure = plotly.go.Figure(variogram_traces(plotly, variogram, covariance, show_legend=True))
    figure.add_hline(y=float(covariance.sill), line={"color": BRICK, "dash": "dot", "width": 1.5},
                     annotation_text="sill", annotation_position="bottom right")
    figure.update_layout(base_layout(
        xaxis={"title": {"text": f"distance ({distance_units})"}, "range": [0, float(variogram.cutoff)]},
        yaxis={"title": {"text": f"semivariance {variance_unit}"},
               "range": [0, gamma_ceiling([variogram], covariance)]},
        legend={"x": 0.02, "y": 0.98}))
    return as_plot(figure, "fc-plot-variogram", height=420)


def directional_plot(plotly: SimpleNamespace, variograms: list[Any], covariance: Any, distance_units: str,
                     variance_unit: str) -> Plot:
    """One panel per direction, two columns, the model drawn along each panel's azimuth."""
    columns = 2
    rows = math.ceil(len(variograms) / columns)
    titles = [f"azimuth {v.azimuth:g}\u00b0 \u00b1 {v.tolerance:g}\u00b0" for v in variograms]
    figure = plotly.subplots.make_subplots(rows=rows, cols=columns, subplot_titles=titles, shared_yaxes=True,
                                           horizontal_spacing=0.08, vertical_spacing=0.14)
    for index, variogram in enumerate(variograms):
        for trace in variogram_traces(plotly, variogram, covariance, show_legend=index == 0):
            figure.add_trace(trace, row=index // columns + 1, col=index % columns + 1)
    figure.update_layout(base_layout(legend={"orientation": "h", "x": 0.0, "y": -0.12}))
    figure.update_xaxes(AXIS_STYLE, range=[0, float(variograms[0].cutoff)])
    figure.update_xaxes(title_text=f"distance ({distance_units})", row=rows)
    figure.update_yaxes(AXIS_STYLE, range=[0, gamma_ceiling(variograms, covariance)])
    figure.update_yaxes(title_text=f"semivariance {variance_unit}", col=1)
    return as_plot(figure, "fc-plot-directional", height=330 * rows + 60)


def ellipse_scale(xy: np.ndarray, covariance: Any) -> float:
    """Factor (at most 1) that shrinks the largest range ellipse to fit inside the samples' extent.

    An ellipse larger than the study area would squeeze the samples into a
    corner of the map, so it is drawn smaller, its shape and direction kept.
    """
    extent = float(np.max(xy.max(axis=0) - xy.min(axis=0)))
    largest = max(s.effective_range for s in covariance.structures)
    return min(1.0, ELLIPSE_SHARE * extent / largest) if extent > 0 else 1.0


def sample_map_plot(plotly: SimpleNamespace, xy: np.ndarray, values: np.ndarray, ids: np.ndarray,
                    covariance: Any, label: str, distance_units: str) -> Plot:
    """Samples coloured by value with each structure's effective-range ellipse at the samples' centre."""
    xy = np.asarray(xy, dtype=float)
    centre = 0.5 * (xy.min(axis=0) + xy.max(axis=0))
    scale = ellipse_scale(xy, covariance)
    drawn = "" if scale == 1.0 else f" (drawn at 1:{1.0 / scale:.3g})"
    traces = [plotly.go.Scatter(
        x=xy[:, 0].tolist(), y=xy[:, 1].tolist(), mode="markers", name="samples",
        text=[str(i) for i in ids], customdata=np.asarray(values, dtype=float).tolist(),
        hovertemplate="id %{text}<br>value %{customdata:.4g}<extra></extra>",
        marker={"size": 7, "color": np.asarray(values, dtype=float).tolist(), "colorscale": VALUE_SCALE,
                "line": {"color": INK, "width": 0.5},
                "colorbar": {"title": {"text": label, "side": "right"}, "thickness": 14}})]
    for index, structure in enumerate(covariance.structures, start=1):
        outline = range_ellipse(structure, centre, scale)
        name = "effective range" if len(covariance.structures) == 1 else f"effective range, structure {index}"
        name += drawn
        traces.append(plotly.go.Scatter(x=outline["x"], y=outline["y"], mode="lines", name=name,
                                        line={"color": BRICK, "width": 2, "dash": "solid" if index == 1 else "dash"},
                                        hoverinfo="skip"))
    layout = base_layout(
        xaxis={"title": {"text": f"easting ({distance_units})"}},
        yaxis={"title": {"text": f"northing ({distance_units})"}, "scaleanchor": "x", "scaleratio": 1},
        legend={"orientation": "h", "x": 0.0, "y": -0.15})
    return as_plot(plotly.go.Figure(traces, layout), "fc-plot-sample-map", height=520)
