"""Covariance fitting at scale: REML or ML with the Vecchia likelihood of :mod:`.vecchia`.

The exact likelihood costs ``O(n^3)`` time and ``O(n^2)`` memory per
evaluation; above :data:`.fitting.VECCHIA_THRESHOLD` samples :func:`.fitting.fit_model`
hands over to :func:`fit_vecchia`, whose cost per evaluation is ``O(n m^3)``
time and ``O(n m)`` memory (``m`` conditioning neighbours). The fit runs in
two steps:

1. Model choice on a subset. The exact fit (:func:`.exact_fit.fit_exact`, same
   kernel, anisotropy, nested, mean and method settings) on
   :data:`SUBSET_SIZE` samples drawn at random (fixed seed) chooses the
   family, anisotropy and structures by AIC and gives the starting values.
   The subset has enough samples to tell the families apart at a fraction of
   the cost; its criteria are not comparable with those on all samples, so
   the result lists the chosen model only.
2. Vecchia refinement on all samples. L-BFGS-B with the analytic Vecchia
   gradient, on the same standardised units and parameter bounds as the
   exact fit (:mod:`.search`, :mod:`..model.parameters`). The conditioning sets
   are searched in the anisotropy frame of the starting model and kept fixed
   while optimising (so the objective is smooth); for an anisotropic model
   they are searched again in the frame of the estimate and the optimiser
   restarts from it once.

The reported log-likelihood, AIC and BIC are those of the Vecchia
approximation at the estimate; ``FitResult.likelihood`` says
``"vecchia (m neighbours)"``.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace

import numpy as np

from ..errors import FieldcastError
from ..io.samples import check_samples
from ..model.parameters import ParameterLayout, parameter_bounds
from .bound_warnings import bound_warnings
from .data_warnings import data_warnings
from .exact_fit import fit_exact
from .minimiser import clamped, convergence_warning, minimise
from .options import (
    CandidateFit,
    FitOptions,
    FitResult,
    check_fit_choices,
    checked_error_variance,
    information_criteria,
    mean_model_for,
)
from .search import SearchProblem
from .vecchia import DEFAULT_NEIGHBOURS, VecchiaData, VecchiaObjective, VecchiaPlan

SUBSET_SIZE = 1000
"""Samples of the exact fit that chooses the model and the starting values."""

LOG_LIKELIHOOD_TOLERANCE = 1e-3
"""L-BFGS-B stops when an iteration gains less than about this much log-likelihood (far below the
statistical uncertainty: a change of 0.5 in ``l`` is about one standard error along one parameter)."""

GRADIENT_TOLERANCE = 1e-2
"""... or when no log-likelihood derivative (per log-parameter) exceeds this."""


def _optimise(problem: SearchProblem, layout: ParameterLayout, start: np.ndarray, neighbours: int,
              progress: Callable[[float], None] | None) -> tuple[np.ndarray, float, np.ndarray, str | None]:
    """Vecchia fit from ``start`` (sets rebuilt once for anisotropy).

    Returns ``theta``, ``-2 l``, the basis coefficients and the last run's :func:`.minimiser.convergence_warning`.
    """
    bounds = parameter_bounds(layout, problem.internal_scales)
    theta = clamped(start, bounds)
    rounds = 2 if layout.anisotropy else 1
    for round_index in range(rounds):
        plan = VecchiaPlan.build(problem.xy, neighbours, layout.unpack(theta).structures[0])
        data = VecchiaData(problem.xy, problem.y, problem.basis, problem.method, plan, problem.error_variance)

        def on_step(evaluations: int, done: int = round_index) -> None:
            if progress is not None:
                progress(0.5 + 0.5 * (done + min(evaluations / 60.0, 0.95)) / rounds)

        objective = VecchiaObjective(data, layout, problem.should_stop)

        def minus_two_log_likelihood(x: np.ndarray, objective: VecchiaObjective = objective,
                                     on_step: Callable[[int], None] = on_step) -> tuple[float, np.ndarray]:
            value = objective.value_and_gradient(x)
            on_step(objective.evaluations)
            return value

        result = minimise(minus_two_log_likelihood, theta, bounds, samples=len(data.y),
                          log_likelihood_tolerance=LOG_LIKELIHOOD_TOLERANCE, gradient_tolerance=GRADIENT_TOLERANCE,
                          max_iterations=problem.max_iterations)
        theta = result.x
    terms = data.evaluate(layout.unpack(theta))
    return theta, terms.minus_two_log_likelihood, terms.basis_coefficients, convergence_warning(result)


def fit_vecchia(xy: np.ndarray, values: np.ndarray, options: FitOptions, *,
                neighbours: int = DEFAULT_NEIGHBOURS, subset_size: int = SUBSET_SIZE,
                covariates: np.ndarray | None = None, progress: Callable[[float], None] | None = None,
                should_stop: Callable[[], bool] | None = None, error_variance: np.ndarray | None = None) -> FitResult:
    """Fit a covariance model to many samples with the Vecchia likelihood (see the module docstring).

    Parameters
    ----------
    xy, values : ndarray
        As for :func:`.fitting.fit_model`.
    options : FitOptions
        The settings of :func:`.fitting.fit_model` (``method`` "reml" or "ml").
    neighbours : int
        Conditioning-set size ``m`` of the Vecchia likelihood.
    subset_size : int
        Samples of the exact fit that chooses the model (all if fewer).
    covariates : ndarray of shape (n, k), optional
        External-drift columns for the mean.
    progress, should_stop : callable, optional
        Progress fraction in [0, 1]; cancel request (raises ``Cancelled``).
    error_variance : ndarray of shape (n,), optional
        Per-sample measurement-error variances (value units squared), as for :func:`.fitting.fit_with`;
        ``options.nugget`` holds the nugget fixed in both steps.

    Returns
    -------
    FitResult
        ``likelihood`` is ``"vecchia (m neighbours)"``; ``candidates`` holds
        the chosen model only.
    """
    kernel, method = options.kernel, options.method
    check_fit_choices(kernel, method, options.nested, options.smoothness)
    if method == "wls":
        raise FieldcastError("The Vecchia fit maximises a likelihood; choose METHOD reml or ml.")
    check_samples(xy, values)
    points = np.asarray(xy, dtype=float)
    observed = np.asarray(values, dtype=float)
    error_variance = checked_error_variance(error_variance, len(observed), method)
    mean_model = mean_model_for(options.mean, points, covariates, options.known_mean)
    design = mean_model.design(points, covariates)
    n = len(observed)
    subset = np.sort(np.random.default_rng(0).choice(n, min(subset_size, n), replace=False))
    rough = fit_exact(points[subset], observed[subset], replace(options, mean=mean_model),
                      covariates=None if covariates is None else np.asarray(covariates)[subset],
                      progress=None if progress is None else (lambda f: progress(0.5 * f)), should_stop=should_stop,
                      error_variance=None if error_variance is None else error_variance[subset])
    chosen = min(rough.candidates, key=lambda c: c.aic)
    problem = SearchProblem.standardise(points, observed - mean_model.known_mean(n), design, method,
                                        should_stop, options.max_iterations, options.nugget, error_variance)
    layout = ParameterLayout(chosen.family, len(chosen.covariance.structures), chosen.anisotropy, options.smoothness,
                             problem.nugget)
    start = layout.pack(problem.to_internal_units(chosen.covariance))
    theta, minus_two, basis_coefficients, stopped = _optimise(problem, layout, start, neighbours, progress)
    model = problem.to_data_units(layout.unpack(theta))
    log_likelihood = problem.log_likelihood(minus_two)
    aic, bic, k = information_criteria(problem, log_likelihood, layout)
    messages = data_warnings(points, model, options.units) + bound_warnings(
        layout, layout.pack(model), parameter_bounds(layout, problem.data_scales), options.units)
    if stopped:
        messages.append(stopped)
    coefficients = problem.basis.coefficients(basis_coefficients) * problem.value_scale
    if progress is not None:
        progress(1.0)
    candidate = CandidateFit(layout.family, layout.anisotropy, log_likelihood, aic, bic, model, list(messages))
    return FitResult(model, mean_model, coefficients, method, log_likelihood, aic, bic, n, k, messages,
                     likelihood=f"vecchia ({min(neighbours, n - 1)} neighbours)", candidates=[candidate],
                     fixed_nugget=options.nugget,
                     error_variance_field=None if error_variance is None else options.error_variance_field)
