"""The cross-validation report: how well the model predicts samples it did not see.

:func:`write_crossvalidation_report` renders ``templates/crossvalidation.html.j2``
into one self-contained HTML page, with the numbers also in the
``fieldcast-data`` JSON block (see :mod:`.page`).
"""
from __future__ import annotations

import math
import os
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from ...algorithms import write_text_atomically
from .crossvalidation_figures import observed_predicted_plot, residual_map_plot, standardized_histogram_plot
from .model_tables import parameter_rows, scale_words, variance_units
from .page import ReportError, render
from .plotting import load_plotly, plotly_context
from .statistics import histogram

if TYPE_CHECKING:
    from ...algorithms import CrossValidation, ModelDocument

NORMAL_95 = 1.959963984540054
"""Two-sided 95 % quantile of the standard normal distribution."""

WORST_COUNT = 10
"""Number of samples listed as the worst predicted."""

HISTOGRAM_STEP = 0.5
"""Bin width of the standardised-residual histogram."""


def scheme_words(fold: np.ndarray) -> str:
    """``"leave-one-out"`` when every sample is its own fold, else ``"k-fold (k = ...)"``."""
    folds = len(np.unique(fold))
    return "leave-one-out" if folds == len(fold) else f"k-fold (k = {folds})"


def summary_rows(summary: dict[str, Any], label: str) -> list[dict[str, Any]]:
    """The summary statistics with their ideal value, a rough band and how to read each.

    The bands are ideal +- 1.96 standard errors for ``n`` independent
    standard-normal errors: ``RMSE / sqrt(n)`` for the mean error,
    ``sqrt(2 / n)`` for the mean squared standardised residual (a
    chi-squared variable with ``n`` degrees of freedom divided by ``n``) and
    ``sqrt(0.95 * 0.05 / n)`` for the coverage (a binomial proportion).
    Cross-validation errors are correlated, so the bands are a guide only. The coverage band is
    clipped to 0-100 % and the MSDR band to 0 and above (values neither can take).
    """
    n = int(summary["n"])
    rmse = float(summary["RMSE"])
    rows = [
        ("ME", "mean error", summary["ME"], 0.0, NORMAL_95 * rmse / math.sqrt(n),
         "Mean of observed minus predicted. Near 0: no overall bias. Positive: the model predicts too low on "
         "average; negative: too high."),
        ("RMSE", "root mean squared error", rmse, None, None,
         f"Typical size of a prediction error, in {label}. Smaller is better; compare models on the same samples "
         "and the same scale."),
        ("MSDR", "mean squared standardised residual", summary["MSDR"], 1.0, NORMAL_95 * math.sqrt(2.0 / n),
         "Mean of squared error divided by the predicted variance. Near 1: the kriging variance matches the real "
         "errors. Above 1: the variance is too small (the model is over-confident); below 1: too large."),
        ("COVERAGE95", "coverage of the 95 % intervals", summary["COVERAGE95"], 0.95,
         NORMAL_95 * math.sqrt(0.95 * 0.05 / n),
         "Share of samples inside their 95 % prediction interval. Near 95 %: the intervals are honest; well below: "
         "too narrow; well above: too wide."),
    ]
    return [{
        "key": key, "label": words, "value": float(value), "ideal": ideal,
        "band": None if half is None else clipped_band(key, ideal, half),
        "inside": None if half is None else bool(abs(float(value) - ideal) <= half),
        "reading": reading,
    } for key, words, value, ideal, half, reading in rows]


def clipped_band(key: str, ideal: float, half: float) -> list[float]:
    """``[ideal - half, ideal + half]`` cut to the values the statistic ``key`` can take."""
    low, high = ideal - half, ideal + half
    if key in ("MSDR", "COVERAGE95"):
        low = max(low, 0.0)
    if key == "COVERAGE95":
        high = min(high, 1.0)
    return [low, high]


def attribute_rows(summary: dict[str, Any], field: str) -> list[dict[str, Any]]:
    """ME and RMSE in attribute units (a log model's predictions back-transformed to the median)."""
    name = field or "the attribute"
    rows = [
        ("ME_ATTRIBUTE", f"mean error in {name} units", summary["ME_ATTRIBUTE"],
         f"Mean of the observed value minus the prediction back-transformed to the median, exp(mu) - offset, in "
         f"{name}'s own units. The median lies below the lognormal mean, so this is usually positive even for a "
         "sound model; read the bias from ME in the log scale."),
        ("RMSE_ATTRIBUTE", f"root mean squared error in {name} units", summary["RMSE_ATTRIBUTE"],
         f"Typical size of a prediction error in {name}'s own units, dominated by the largest values. Smaller is "
         "better."),
    ]
    return [{"key": key, "label": words, "value": float(value), "ideal": None, "band": None, "inside": None,
             "reading": reading} for key, words, value, reading in rows]


def worst_samples(cv: CrossValidation, ids: list, xy: np.ndarray, count: int = WORST_COUNT) -> list[dict[str, Any]]:
    """The ``count`` samples with the largest absolute standardised residual, largest first (ties: input order)."""
    order = np.argsort(-np.abs(cv.standardized), kind="stable")[:count]
    return [{
        "index": int(i), "id": ids[i], "x": float(xy[i, 0]), "y": float(xy[i, 1]),
        "observed": float(cv.observed[i]), "predicted": float(cv.predicted[i]), "residual": float(cv.residual[i]),
        "standardized": float(cv.standardized[i]), "std": math.sqrt(float(cv.variance[i])), "fold": int(cv.fold[i]),
    } for i in order]


def residual_histogram(standardized: np.ndarray) -> dict[str, list[float]]:
    """Histogram of standardised residuals over bins of :data:`HISTOGRAM_STEP` covering at least [-3, 3]."""
    low = math.floor(min(-3.0, float(standardized.min())) / HISTOGRAM_STEP) * HISTOGRAM_STEP
    high = math.ceil(max(3.0, float(standardized.max())) / HISTOGRAM_STEP) * HISTOGRAM_STEP
    edges = np.linspace(low, high, int(round((high - low) / HISTOGRAM_STEP)) + 1)
    return histogram(standardized, edges)


def check_inputs(cv: CrossValidation, ids: Sequence, xy: np.ndarray) -> None:
    """ReportError unless there is one id and one location per cross-validated sample."""
    n = len(cv.observed)
    if len(ids) != n or xy.shape != (n, 2):
        raise ReportError(f"The cross-validation has {n} samples but {len(ids)} ids and locations of shape "
                          f"{xy.shape} were given; pass the ids and (n, 2) locations of the same samples.")
    if n < 2:
        raise ReportError("A cross-validation report needs at least two samples.")


def write_crossvalidation_report(
    path: str | os.PathLike,
    *,
    cv: CrossValidation,
    ids: Sequence,
    xy: np.ndarray,
    model: ModelDocument,
    crs_name: str,
) -> None:
    """Write the HTML report of a cross-validation to ``path`` (through a temporary file in the same folder).

    Parameters
    ----------
    path : str or PathLike
        Output ``.html`` file; its folder must exist.
    cv : CrossValidation
        From ``crossval.leave_one_out`` or ``crossval.k_fold``; values in the
        modelling scale.
    ids : sequence
        Identifier of each sample (e.g. feature ids), in the order of ``cv``.
    xy : ndarray of shape (n, 2)
        Sample locations in the working CRS, in the order of ``cv``.
    model : ModelDocument
        The model that was cross-validated (transform, units, field, parameters).
    crs_name : str
        Name of the working CRS, e.g. ``"Amersfoort / RD New"``.
    """
    xy = np.asarray(xy, dtype=float)
    check_inputs(cv, ids, xy)
    ids = [i.item() if isinstance(i, np.generic) else i for i in ids]
    shown_ids = [str(i) for i in ids]
    label = scale_words(model.transform, model.field)
    summary = {**cv.summary(), **cv.attribute_summary(model.transform)}
    logged = model.transform.kind != "none"
    rows = summary_rows(summary, label) + (attribute_rows(summary, model.field) if logged else [])
    observed_values, predicted_values = cv.attribute_values(model.transform)
    worst = worst_samples(cv, ids, xy)
    bins = residual_histogram(np.asarray(cv.standardized, dtype=float))
    scheme = scheme_words(np.asarray(cv.fold))
    plotly = load_plotly()
    plots = {}
    if plotly is not None:
        plots = {
            "observed_predicted": observed_predicted_plot(plotly, np.asarray(cv.observed), np.asarray(cv.predicted),
                                                          shown_ids, label),
            **({"observed_predicted_values": observed_predicted_plot(
                plotly, observed_values, predicted_values, shown_ids, model.field or "attribute units",
                "fc-plot-observed-predicted-values")} if logged else {}),
            "residual_map": residual_map_plot(plotly, xy, np.asarray(cv.standardized), shown_ids, model.units),
            "residual_histogram": standardized_histogram_plot(plotly, bins),
        }
    embedded = {
        "report": "crossvalidation",
        "field": model.field,
        "units": model.units,
        "crs_name": crs_name,
        "transform": model.transform.to_dict(),
        "scheme": scheme,
        "summary": summary,
        "worst": worst,
        "standardized_histogram": bins,
        "samples": {"id": ids, "x": xy[:, 0], "y": xy[:, 1], "observed": cv.observed, "predicted": cv.predicted,
                    "variance": cv.variance, "standardized": cv.standardized, "fold": cv.fold,
                    "observed_value": observed_values, "predicted_value": predicted_values},
        "model": model.covariance.to_dict(),
    }
    text = render("crossvalidation.html.j2", {
        "title": f"Cross-validation report: {model.field}" if model.field else "Cross-validation report",
        "field": model.field, "units": model.units, "crs_name": crs_name, "scale_label": label,
        "transform": model.transform, "scheme": scheme, "n": summary["n"], "rows": rows, "worst": worst,
        "show_folds": scheme != "leave-one-out", "mean_kind": model.mean.kind,
        "parameters": parameter_rows(model.covariance, model.units, variance_units(model.transform, model.field)),
        "plots": plots, "embedded": embedded, **plotly_context(plotly),
    })
    write_text_atomically(path, text, "the report")
