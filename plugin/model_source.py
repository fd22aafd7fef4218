"""Fitting a model into a model document, and reading one back for a working CRS."""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace

import numpy as np
from qgis.core import QgsProcessingFeedback

from ..algorithms import (
    CovariateSet,
    FieldcastError,
    FitOptions,
    FitResult,
    ModelDocument,
    Transform,
    WorkingCrs,
    censoring_words,
    coefficient_line,
    covariate_mean,
    fit_censored,
    fit_log_lines,
    fit_shared,
    fit_with,
    parse_crs,
    range_warning,
    same_crs,
    trend_standard_errors,
)


def fit_document(xy: np.ndarray, values: np.ndarray, transform: Transform, working: WorkingCrs, field: str,
                 settings: FitOptions, progress: Callable[[float], None] | None = None,
                 should_stop: Callable[[], bool] | None = None, covariates: CovariateSet | None = None,
                 columns: np.ndarray | None = None, error_variance: np.ndarray | None = None,
                 error_field: str = "", censored: np.ndarray | None = None,
                 censoring: dict | None = None) -> tuple[ModelDocument, FitResult]:
    """Fit a covariance and mean model and wrap it, with its CRS and transform, as a model document.

    ``xy`` is in the working CRS and ``values`` in the modelling scale (after ``transform``); ``columns`` are the
    design columns of ``covariates`` at the samples (refused when collinear with the trend terms);
    ``error_variance`` the samples' measurement-error variances from the field ``error_field`` (its name goes
    into the model file). ``censored`` marks values that are limits: the engine's ``fit_censored`` (stochastic
    EM) fits them, and the document's ``fit["censored"]`` says so; ``censoring`` is that entry for limits already
    substituted.
    Returns the document and the engine's fit result (candidates and all), which the fit report reads. The fit's
    warnings give distances in the working CRS's units.
    """
    settings = replace(with_covariate_mean(settings, xy, covariates, columns), units=working.units)
    if error_field:
        settings = replace(settings, error_variance_field=error_field)
    if censored is not None and censored.any():
        fit = fit_censored(xy, values, censored, settings, covariates=columns, progress=progress,
                           should_stop=should_stop)
        result, censoring, values = fit.result, fit.summary(), fit.imputations.mean(axis=0)
    else:
        result = fit_with(xy, values, settings, covariates=columns, progress=progress, should_stop=should_stop,
                          error_variance=error_variance)
    document = result_document(result, transform, working, field, covariates,
                               trend_standard_errors(xy, result.covariance, result.mean, columns, error_variance))
    if censoring:
        document.fit["censored"] = censoring
    return document, result


def with_covariate_mean(settings: FitOptions, xy: np.ndarray, covariates: CovariateSet | None,
                        columns: np.ndarray | None) -> FitOptions:
    """The settings with a mean model naming the covariates' columns, refused when they are collinear with the
    trend at the samples; the settings unchanged without covariates."""
    if covariates is None or not covariates.covariates:
        return settings
    return replace(settings, mean=covariate_mean(settings.mean, xy, covariates.column_names, columns))


def result_document(result: FitResult, transform: Transform, working: WorkingCrs, field: str,
                    covariates: CovariateSet | None = None, errors: np.ndarray | None = None) -> ModelDocument:
    """A fit result as a model document of ``field`` in the working CRS, with its covariates and the standard
    errors of its coefficients (when computed)."""
    return ModelDocument(result.covariance, result.mean, result.coefficients, transform, working.wkt, working.units,
                         field, result.summary(), covariates or CovariateSet(),
                         np.zeros(0) if errors is None else errors)


def fit_shared_documents(xy: np.ndarray, values: np.ndarray, transform: Transform, working: WorkingCrs,
                         fields: list[str], settings: FitOptions, progress: Callable[[float], None] | None = None,
                         should_stop: Callable[[], bool] | None = None, covariates: CovariateSet | None = None,
                         columns: np.ndarray | None = None) -> list[tuple[ModelDocument, FitResult]]:
    """One correlation model fitted jointly to several fields (``values`` (n, k)), as one document per field.

    See :mod:`..algorithms.fit.shared`: every document holds the shared model at its field's scale. ``covariates``
    and ``columns`` as for :func:`fit_document`. Returns each field's document with its fit result, in the order
    of ``fields``.
    """
    settings = replace(with_covariate_mean(settings, xy, covariates, columns), units=working.units)
    results = fit_shared(xy, values, settings, fields, covariates=columns, progress=progress, should_stop=should_stop)
    return [(result_document(result, transform, working, field, covariates,
                             trend_standard_errors(xy, result.covariance, result.mean, columns)), result)
            for result, field in zip(results, fields)]


def log_fit(feedback: QgsProcessingFeedback, xy: np.ndarray, values: np.ndarray, result: FitResult,
            document: ModelDocument, label: str = "", columns: np.ndarray | None = None) -> None:
    """The log of a fit, the same in every algorithm that fits a model.

    Info: the chosen model in words, every candidate with its AIC and ΔAIC (the engine's ``fit_log_lines``) and
    the trend coefficients with their standard errors. Warnings: the fit's own (few samples, no structure
    resolved, parameters at a bound, convergence) and the engine's ``range_warning`` (a range beyond the study
    while the residuals level off inside it). ``xy`` and ``values`` are the samples fitted, in the working CRS
    and the modelling scale, ``columns`` their covariate columns; ``label`` (a field name), when given, starts
    every line, for runs that fit several fields.
    """
    prefix = f"{label}: " if label else ""
    if "censored" in document.fit:
        feedback.pushInfo(prefix + censoring_words(document.fit["censored"]))
    for line in fit_log_lines(result, document.units):
        feedback.pushInfo(prefix + line)
    feedback.pushInfo(prefix + coefficient_line(document.mean.term_names, document.coefficients,
                                                document.standard_errors))
    long_range = range_warning(xy, values, result, document.units, columns)
    for warning in [*document.fit.get("warnings", []), *([long_range] if long_range else [])]:
        feedback.pushWarning(prefix + warning)


def load_document(path: str, working: WorkingCrs) -> ModelDocument:
    """Read a model file and check it was fitted in the working CRS.

    Raises
    ------
    FieldcastError
        If the file is unreadable or malformed, or its CRS differs from the working CRS (the advice names the
        template when the working CRS is a template's).
    """
    document = ModelDocument.load(path)
    if not same_crs(document.crs_wkt, working.wkt):
        model_crs = parse_crs(document.crs_wkt)
        code = model_crs.to_authority()
        named = model_crs.name + (f" ({code[0]}:{code[1]})" if code else "")
        remedy = (f"Choose a template in {named}, or refit the model with 'Target CRS' set to the template's CRS"
                  if working.template else f"Set 'Target CRS' to {named}, or refit the model on these samples")
        raise FieldcastError(f"The model was fitted in {model_crs.name!r}, but the samples are worked in "
                             f"{parse_crs(working.wkt).name!r}, so its ranges would be read in the wrong units "
                             f"or axes. {remedy}.")
    return document


def describe_document(document: ModelDocument) -> str:
    """One paragraph for the log: structures, nugget, mean and transform of a model."""
    fixed = " (fixed)" if document.fit.get("fixed_nugget") is not None else ""
    parts = [f"nugget {document.covariance.nugget:.4g}{fixed}"]
    for structure in document.covariance.structures:
        parts.append(f"{structure.family} partial sill {structure.partial_sill:.4g}, range {structure.range:.4g} "
                     f"{document.units}, azimuth {structure.azimuth:.1f}°, ratio {structure.ratio:.3g}")
    transform = "no transform" if document.transform.kind == "none" else \
        f"transform: {document.transform.units_note} modelled"
    covariates = ", ".join(f"{c.name} ({c.kind}" + (f", baseline class {c.baseline:g})" if c.kind == "class" else ")")
                           for c in document.covariates.covariates)
    mean = f"{document.mean.kind} mean" + (f" with covariates {covariates}" if covariates else "")
    errors = document.fit.get("error_variance_field")
    fitted_with = f"; fitted with the per-sample error variances of {errors}" if errors else ""
    return f"Model: {'; '.join(parts)}; {mean}; {transform}{fitted_with}."
