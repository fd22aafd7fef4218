"""The fit report: what data went in, how the semivariogram looks, which model was chosen and why.

:func:`write_fit_report` renders ``templates/fit.html.j2`` into one
self-contained HTML page. Every number on the page is also in the
``fieldcast-data`` JSON block (see :mod:`.page`).
"""
from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from ...algorithms import censoring_words, write_text_atomically
from .fit_figures import (
    declustered_histogram_plot,
    directional_plot,
    histogram_plot,
    omnidirectional_plot,
    sample_map_plot,
)
from .model_tables import family_name, parameter_rows, scale_words, variance_units
from .page import ReportError, render
from .plotting import load_plotly, plotly_context
from .statistics import STATISTIC_LABELS, describe, histogram

if TYPE_CHECKING:
    from ...algorithms import Declustering, EmpiricalVariogram, FitResult, ModelDocument, Samples

MEAN_WORDS = {
    "known": "known mean (simple kriging)",
    "constant": "constant mean estimated from the data (ordinary kriging)",
    "linear": "linear trend in the coordinates (universal kriging)",
    "quadratic": "quadratic trend in the coordinates (universal kriging)",
}

TERM_WORDS = {"1": "intercept", "u": "u", "v": "v", "u2": "u\u00b2", "uv": "u \u00d7 v", "v2": "v\u00b2"}
"""How the mean terms are printed; covariates keep their names."""

WARNING_KINDS = (
    ("bound", "Parameter on a bound"),
    ("reached", "Parameter on a bound"),
    ("diagonal", "Numerical jitter added"),
    ("approximat", "Approximation used"),
)
"""Words looked for in a fit warning, and the heading it is shown under (first match wins)."""


def chosen_candidate(fit: FitResult) -> int | None:
    """Index in ``fit.candidates`` of the model that was kept, None if none matches.

    The kept candidate is the one whose covariance model equals the
    result's; failing that, the one whose AIC equals the result's.
    """
    for index, candidate in enumerate(fit.candidates):
        if candidate.covariance == fit.covariance:
            return index
    for index, candidate in enumerate(fit.candidates):
        if math.isclose(candidate.aic, fit.aic, rel_tol=1e-12, abs_tol=1e-9):
            return index
    return None


def candidate_rows(fit: FitResult, loo_rmse: Sequence[float | None] | None) -> list[dict[str, Any]]:
    """One row per candidate: family, anisotropy, log-likelihood, AIC, AIC difference, BIC, LOO RMSE."""
    if loo_rmse is not None and len(loo_rmse) != len(fit.candidates):
        raise ReportError(f"Got {len(loo_rmse)} leave-one-out RMSE values for {len(fit.candidates)} candidate "
                          "models; give one per candidate, in the order of fit.candidates.")
    chosen = chosen_candidate(fit)
    best_aic = min((c.aic for c in fit.candidates), default=math.nan)
    return [{
        "family": candidate.family,
        "family_name": family_name(candidate.family),
        "anisotropy": bool(candidate.anisotropy),
        "log_likelihood": candidate.log_likelihood,
        "aic": candidate.aic,
        "delta_aic": candidate.aic - best_aic,
        "bic": candidate.bic,
        "loo_rmse": None if loo_rmse is None else loo_rmse[index],
        "chosen": index == chosen,
        "warnings": list(candidate.warnings),
    } for index, candidate in enumerate(fit.candidates)]


def warning_items(fit: FitResult) -> list[dict[str, str]]:
    """The fit's warnings with a heading each; an approximate likelihood is stated as one too."""
    messages = list(fit.warnings)
    if fit.likelihood != "exact":
        messages.append(
            f"The likelihood was computed with an approximation ({fit.likelihood}) to keep the fit fast. "
            "Log-likelihood and AIC are then approximate; to check the choice of model, fit an exact model on a "
            "subset of the samples and compare the parameters.")
    items = []
    for message in messages:
        lowered = message.lower()
        heading = next((title for word, title in WARNING_KINDS if word in lowered), "Note")
        items.append({"heading": heading, "message": message})
    return items


def variogram_record(variogram: EmpiricalVariogram) -> dict[str, Any]:
    """The numbers of one empirical semivariogram, as embedded in the page."""
    return {
        "azimuth": variogram.azimuth,
        "tolerance": float(variogram.tolerance),
        "cutoff": float(variogram.cutoff),
        "lag_edges": np.asarray(variogram.lag_edges, dtype=float),
        "distance": np.asarray(variogram.distance, dtype=float),
        "gamma": np.asarray(variogram.gamma, dtype=float),
        "pairs": np.asarray(variogram.pairs, dtype=int),
    }


def split_variograms(variograms: Sequence[EmpiricalVariogram]) -> tuple[EmpiricalVariogram, list]:
    """The omnidirectional semivariogram and the directional ones, or a ReportError."""
    omnidirectional = [v for v in variograms if v.azimuth is None]
    if len(omnidirectional) != 1:
        raise ReportError(f"The fit report needs exactly one omnidirectional semivariogram (azimuth None); got "
                          f"{len(omnidirectional)}.")
    return omnidirectional[0], [v for v in variograms if v.azimuth is not None]


def data_section(samples: Samples, model: ModelDocument, skipped: Mapping[str, int]) -> dict[str, Any]:
    """Counts, statistics and histogram of the samples that went into the fit."""
    values = np.asarray(samples.values, dtype=float)
    modelled = describe(values)
    original = describe(model.transform.back_median(values)) if model.transform.kind != "none" else None
    rows = [{"label": label, "modelled": modelled[key], "original": None if original is None else original[key]}
            for key, label in STATISTIC_LABELS]
    n_used = int(values.size)
    return {
        "n_used": n_used,
        "n_read": n_used + int(samples.merged_points) - int(samples.merged_groups),
        "skipped": [{"reason": reason, "count": int(count)} for reason, count in skipped.items()],
        "merged_groups": int(samples.merged_groups),
        "merged_points": int(samples.merged_points),
        "statistics": modelled,
        "statistic_rows": rows,
        "histogram": histogram(values),
        "censoring": censoring_words(model.fit["censored"]) if "censored" in model.fit else "",
    }


def declustering_section(declustering: Declustering, values: np.ndarray) -> dict[str, Any]:
    """The cell declustering of the samples (attribute ``values``, every sample read): cell size, raw and declustered
    mean, clustering indices, the warning (None) and the raw and declustered histograms."""
    return {"cell_size": declustering.cell_size, "raw_mean": declustering.raw_mean,
            "declustered_mean": declustering.declustered_mean, "clark_evans": declustering.clark_evans,
            "effective_share": declustering.effective_share, "warning": declustering.warning(),
            "histogram": declustering.histogram(values)}


def mean_section(fit: FitResult, standard_errors: Sequence[float] = ()) -> dict[str, Any]:
    """Kind of mean in words, whether it varies in space (trend or covariates), its coefficients and their
    standard errors (None each when not computed), and the covariates' classes and baselines."""
    names = fit.mean.term_names
    coefficients = np.asarray(fit.coefficients, dtype=float)
    errors = [float(error) for error in standard_errors] or [None] * len(names)
    return {
        "kind": fit.mean.kind,
        "has_trend": fit.mean.kind in ("linear", "quadratic") or bool(fit.mean.covariate_names),
        "words": MEAN_WORDS.get(fit.mean.kind, fit.mean.kind),
        "known_value": fit.mean.known_value,
        "origin": list(fit.mean.origin),
        "scale": fit.mean.scale,
        "coefficients": [{"term": name, "words": TERM_WORDS.get(name, name), "value": float(value),
                          "standard_error": error}
                         for name, value, error in zip(names, coefficients, errors)],
    }


def write_fit_report(
    path: str | os.PathLike,
    *,
    samples: Samples,
    fit: FitResult,
    model: ModelDocument,
    variograms: Sequence[EmpiricalVariogram],
    crs_name: str,
    skipped: Mapping[str, int] | None = None,
    candidate_loo_rmse: Sequence[float | None] | None = None,
    declustering: Declustering | None = None,
    attribute_values: np.ndarray | None = None,
) -> None:
    """Write the HTML report of a model fit to ``path`` (through a temporary file in the same folder).

    Parameters
    ----------
    path : str or PathLike
        Output ``.html`` file; its folder must exist.
    samples : Samples
        The samples given to the fit: locations in the working CRS, values in
        the modelling scale (after ``model.transform``), ids, and the counts
        of merged coincident points.
    fit : FitResult
        Result of ``fitting.fit_model``; its candidates fill the model table.
    model : ModelDocument
        The document saved for this fit: transform, CRS units and field name.
    variograms : sequence of EmpiricalVariogram
        One omnidirectional semivariogram (azimuth None) and any directional
        ones (e.g. 0, 45, 90, 135 degrees), of the residuals
        ``values - fit.mean.design(xy, covariates) @ fit.coefficients`` in the
        modelling scale (for a constant mean the same as of the values).
    crs_name : str
        Name of the working CRS, e.g. ``"Amersfoort / RD New"``.
    skipped : mapping of str to int, optional
        Input features left out before the fit, by reason, e.g.
        ``{"value is NULL or not a number": 3}``.
    candidate_loo_rmse : sequence of float, optional
        Leave-one-out RMSE of each candidate in ``fit.candidates`` (modelling
        units); the column shows a dash when omitted.
    declustering : Declustering, optional
        The cell declustering of every sample read, with ``attribute_values`` (their values in attribute units):
        the report then shows the declustered mean and histogram.
    """
    omnidirectional, directional = split_variograms(variograms)
    transform, field, units = model.transform, model.field, model.units
    variance_unit = variance_units(transform, field)
    label = scale_words(transform, field)
    data = data_section(samples, model, skipped or {})
    candidates = candidate_rows(fit, candidate_loo_rmse)
    parameters = parameter_rows(fit.covariance, units, variance_unit)
    mean = mean_section(fit, model.standard_errors)
    mean["covariates"] = model.covariates.to_list()
    warnings = warning_items(fit)
    records = [variogram_record(v) for v in [omnidirectional, *directional]]
    declustered = None if declustering is None else declustering_section(declustering, attribute_values)
    plotly = load_plotly()
    plots = {}
    if plotly is not None:
        plots = {
            "histogram": histogram_plot(plotly, data["histogram"], label),
            "variogram": omnidirectional_plot(plotly, omnidirectional, fit.covariance, units, variance_unit),
            "directional": directional_plot(plotly, directional, fit.covariance, units, variance_unit)
            if directional else None,
            "declustered": None if declustered is None else
            declustered_histogram_plot(plotly, declustered["histogram"], field or "the attribute"),
            "sample_map": sample_map_plot(plotly, samples.xy, samples.values, samples.ids, fit.covariance, label,
                                          units),
        }
    embedded = {
        "report": "fit",
        "field": field,
        "units": units,
        "crs_name": crs_name,
        "transform": transform.to_dict(),
        "data": {key: data[key] for key in ("n_used", "n_read", "skipped", "merged_groups", "merged_points",
                                             "statistics", "histogram")},
        "variograms": records,
        "candidates": [{key: row[key] for key in ("family", "anisotropy", "log_likelihood", "aic", "bic",
                                                  "loo_rmse", "chosen", "warnings")} for row in candidates],
        "model": fit.covariance.to_dict(),
        "mean": mean,
        "fit": {"method": fit.method, "likelihood": fit.likelihood, "log_likelihood": fit.log_likelihood,
                "aic": fit.aic, "bic": fit.bic, "n": fit.n, "n_parameters": fit.n_parameters},
        "warnings": [item["message"] for item in warnings],
        "declustering": declustered,
    }
    text = render("fit.html.j2", {
        "title": f"Model fit report: {field}" if field else "Model fit report",
        "field": field, "units": units, "crs_name": crs_name, "scale_label": label,
        "transform": transform, "variance_unit": variance_unit,
        "data": data, "omnidirectional": omnidirectional, "directional": directional,
        "candidates": candidates, "parameters": parameters, "mean": mean, "fit": fit, "warnings": warnings,
        "plots": plots, "embedded": embedded, "declustering": declustered, **plotly_context(plotly),
    })
    write_text_atomically(path, text, "the report")
