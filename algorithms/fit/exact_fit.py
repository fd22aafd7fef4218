"""The single-field fit with the exact likelihood, or by weighted least squares on the variogram.

:func:`fit_exact` is what :func:`.fitting.fit_model` runs up to
:data:`.fitting.VECCHIA_THRESHOLD` samples (see :mod:`.fitting` for the
methods and the criteria); the Vecchia fit also runs it on a subset to choose
the model and its starting values.
"""
from __future__ import annotations

from collections.abc import Callable

import numpy as np

from ..errors import Cancelled
from ..io.samples import check_samples
from ..model.covariance import CovarianceModel
from ..model.mean import MeanModel
from ..model.parameters import NUGGET_BOUNDS, ParameterLayout, parameter_bounds
from .bound_warnings import bound_warnings
from .data_warnings import data_warnings
from .likelihood import evaluate_model, jitter_message
from .options import (
    AUTO_FAMILIES,
    CandidateFit,
    FitOptions,
    FitResult,
    check_fit_choices,
    checked_error_variance,
    information_criteria,
    mean_model_for,
    with_jitter_in_nugget,
)
from .search import ProgressSteps, SearchFit, SearchProblem, fit_family, planned_steps
from .variogram_fit import fit_wls


def _candidate(problem: SearchProblem, fit: SearchFit, units: str) -> CandidateFit:
    """A likelihood fit converted to data units, with its criteria and warnings (ranges in ``units``)."""
    model = problem.to_data_units(fit.layout.unpack(fit.theta))
    log_likelihood = problem.log_likelihood(fit.minus_two_log_likelihood)
    aic, bic, _ = information_criteria(problem, log_likelihood, fit.layout)
    bounds = parameter_bounds(fit.layout, problem.data_scales)
    messages = bound_warnings(fit.layout, fit.layout.pack(model), bounds, units)
    if fit.jitter:
        messages.append(jitter_message(fit.jitter * problem.value_scale ** 2))
    if fit.stopped:
        messages.append(fit.stopped)
    return CandidateFit(fit.layout.family, fit.layout.anisotropy, log_likelihood, aic, bic, model, messages)


def _wls_candidates(xy: np.ndarray, values: np.ndarray, mean: MeanModel, covariates: np.ndarray | None,
                    layouts: list[ParameterLayout], problem: SearchProblem,
                    steps: ProgressSteps, units: str) -> list[tuple[CandidateFit, ParameterLayout]]:
    """Variogram fits by weighted least squares, scored by the REML log-likelihood at the fitted model."""
    residual = (problem.y - problem.basis.q @ (problem.basis.q.T @ problem.y)) * problem.value_scale
    scored = []
    for layout in layouts:
        if problem.should_stop is not None and problem.should_stop():
            raise Cancelled("Fitting was cancelled.")
        scales = problem.data_scales
        model = fit_wls(xy, residual, layout.family, anisotropy=layout.anisotropy, smoothness=layout.smoothness,
                        scales=scales)
        floor = NUGGET_BOUNDS[0] * scales.variance  # the likelihood fits' nugget floor
        model = CovarianceModel(model.structures, max(model.nugget, floor))
        evaluation = evaluate_model(xy, values, model, mean, "reml", covariates)
        aic, bic, _ = information_criteria(problem, evaluation.log_likelihood, layout)
        messages = bound_warnings(layout, layout.pack(model), parameter_bounds(layout, scales), units)
        if evaluation.jitter:
            messages.append(jitter_message(evaluation.jitter))
        scored.append((CandidateFit(layout.family, layout.anisotropy, evaluation.log_likelihood, aic, bic, model,
                                    messages), layout))
        steps.advance()
    return scored


def fit_exact(xy: np.ndarray, values: np.ndarray, options: FitOptions, *, covariates: np.ndarray | None = None,
              progress: Callable[[float], None] | None = None, should_stop: Callable[[], bool] | None = None,
              error_variance: np.ndarray | None = None) -> FitResult:
    """:func:`.fitting.fit_model` with the exact likelihood whatever the number of samples.

    ``options.nugget`` holds the nugget fixed; ``error_variance`` (n,) adds per-sample measurement-error
    variances (value units squared) to the diagonal (see :func:`.fitting.fit_with`).
    """
    kernel, anisotropy, mean, method, nested, smoothness, known_mean = (
        options.kernel, options.anisotropy, options.mean, options.method, options.nested, options.smoothness,
        options.known_mean)
    check_fit_choices(kernel, method, nested, smoothness)
    check_samples(xy, values)
    xy = np.asarray(xy, dtype=float)
    values = np.asarray(values, dtype=float)
    error_variance = checked_error_variance(error_variance, len(values), method)
    mean_model = mean_model_for(mean, xy, covariates, known_mean)
    y = values - mean_model.known_mean(len(values))
    problem = SearchProblem.standardise(xy, y, mean_model.design(xy, covariates), "ml" if method == "ml" else "reml",
                                        should_stop, options.max_iterations, options.nugget, error_variance)
    families = AUTO_FAMILIES if kernel == "auto" else (kernel,)
    settings = (False, True) if anisotropy and kernel == "auto" else (anisotropy,)
    if method == "wls":
        layouts = [ParameterLayout(f, 1, a, smoothness) for f in families for a in settings]
        steps = ProgressSteps(len(layouts), progress)
        scored = _wls_candidates(xy, values, mean_model, covariates, layouts, problem, steps, options.units)
    else:
        steps = ProgressSteps(planned_steps(len(y), len(families), settings, nested), progress)
        scored = [(_candidate(problem, fit, options.units), fit.layout) for family in families
                  for fit in fit_family(problem, family, smoothness, settings, nested, steps)]
    chosen, layout = min(scored, key=lambda pair: pair[0].aic)
    evaluation = evaluate_model(xy, values, chosen.covariance, mean_model, problem.method, covariates, error_variance)
    messages = data_warnings(xy, chosen.covariance, options.units) + list(chosen.warnings)
    covariance = with_jitter_in_nugget(chosen.covariance, evaluation.jitter, messages)
    _, _, k = information_criteria(problem, chosen.log_likelihood, layout)
    if progress is not None:
        progress(1.0)
    return FitResult(covariance, mean_model, evaluation.coefficients, method, chosen.log_likelihood,
                     chosen.aic, chosen.bic, len(values), k, messages, candidates=[pair[0] for pair in scored],
                     fixed_nugget=options.nugget,
                     error_variance_field=None if error_variance is None else options.error_variance_field)
