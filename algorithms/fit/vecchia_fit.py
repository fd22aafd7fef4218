"""Covariance fitting at scale: REML or ML with the Vecchia likelihood of :mod:`.vecchia`.

The exact likelihood costs ``O(n^3)`` time and ``O(n^2)`` memory per
evaluation; above :data:`.fitting.VECCHIA_THRESHOLD` samples :func:`.fitting.fit_model`
hands over to :func:`fit_vecchia`, whose cost per evaluation is ``O(n m^3)``
time and ``O(n m)`` memory (``m`` conditioning neighbours). The fit runs in
three steps:

1. Family choice on a subset. The exact fit (:func:`.exact_fit.fit_exact`, same
   kernel, anisotropy, mean and method settings) on :data:`SUBSET_SIZE` samples
   drawn at random (fixed seed) chooses the family and anisotropy by AIC and
   gives the starting values. The subset has enough samples to tell the families
   apart at a fraction of the cost; its criteria are not comparable with those
   on all samples, so the number of scales is not chosen there (a sparse
   subset misses the short scale).
2. Vecchia refinement on all samples, on the same standardised units and
   parameter bounds as the exact fit (:mod:`.search`, :mod:`..model.parameters`).
   First with :data:`WARM_START_NEIGHBOURS` (10) conditioning neighbours per
   sample: Fisher scoring (:func:`.search.newton_steps` with the Vecchia
   information of :mod:`.vecchia`), then L-BFGS-B with the analytic gradient
   from there (the start may be far from the optimum, where scoring's steps
   are capped). Then, from that estimate, with ``FitOptions.likelihood_neighbours``
   of them by Fisher scoring alone, which near the optimum converges in a
   few of the costly evaluations (the warm start and the scoring of Guinness
   2021, *Stat. Comput.* 31:25). The conditioning sets are searched in the
   anisotropy frame of the starting model and kept fixed while optimising (so
   the objective is smooth); the sets of 10 are the nearest 10 of the full
   sets. An isotropic frame does not depend on the parameters, so all
   isotropic fits share one ordering and one set of neighbours (and an
   anisotropic frame met again reuses its plan); for an anisotropic model the
   sets are searched again in the frame of the estimate and Fisher scoring
   runs once more from it.
3. Number of scales (``kernel="auto"``, ``nested`` off). The subset also chooses
   the family of a two-structure model (a second exact fit, ``nested`` on), which
   is then fitted on all samples too, from the best (by Vecchia likelihood) of
   that subset fit and the starts of :mod:`.vecchia_scales`, compared with 10
   neighbours as the first optimisation runs; the model with the
   lower AIC on the Vecchia likelihood is kept, and both are listed as candidates.

The reported log-likelihood, AIC and BIC are those of the Vecchia
approximation at the estimate; ``FitResult.likelihood`` says
``"vecchia (m neighbours)"``.
"""
from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import replace

import numpy as np
from scipy import optimize

from ..errors import FieldcastError
from ..io.samples import check_samples
from ..model.covariance import CovarianceModel
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
from .search import NEWTON_ITERATIONS, SearchProblem, newton_steps
from .vecchia import VecchiaData, VecchiaObjective, VecchiaPlan
from .vecchia_scales import two_scale_starts

SUBSET_SIZE = 1000
"""Samples of the exact fit that chooses the model and the starting values."""

LOG_LIKELIHOOD_TOLERANCE = 1e-3
"""L-BFGS-B and Fisher scoring stop when an iteration gains less than about this much log-likelihood (far below the
statistical uncertainty: a change of 0.5 in ``l`` is about one standard error along one parameter)."""

GRADIENT_TOLERANCE = 1e-2
"""... or when no log-likelihood derivative (per log-parameter) exceeds this."""

WARM_START_NEIGHBOURS = 10
"""Conditioning-set size of the first optimisation of every fit on all samples, whose estimate starts the one with
``FitOptions.likelihood_neighbours``: an evaluation with 10 neighbours costs a fraction of one with 30, and the
optimum moves little between them, so the costly evaluations are spent near the optimum (Guinness 2021, *Stat.
Comput.* 31:25, does the same and reports that it saves most of the time)."""


class _Plans:
    """Conditioning sets of the fits on all samples, one plan per search frame.

    The maximin ordering and the nearest previous neighbours depend on a model only through the frame of its first
    structure (its azimuth and ratio), so every isotropic fit shares one plan, and an anisotropic frame met again
    reuses its plan (the two-structure fit starts in the frame its starts were compared in).
    """

    def __init__(self, xy: np.ndarray, neighbours: int) -> None:
        self.xy, self.neighbours = xy, neighbours
        self._built: dict[tuple[float, float] | None, VecchiaPlan] = {}

    def for_model(self, model: CovarianceModel, anisotropy: bool) -> VecchiaPlan:
        """The plan whose sets are searched in the frame of ``model`` (Euclidean when ``anisotropy`` is off)."""
        first = model.structures[0]
        frame = (first.azimuth, first.ratio) if anisotropy else None
        if frame not in self._built:
            self._built[frame] = VecchiaPlan.build(self.xy, self.neighbours, first if anisotropy else None)
        return self._built[frame]


def _optimise(problem: SearchProblem, layout: ParameterLayout, start: np.ndarray, plans: _Plans,
              progress: Callable[[float], None] | None) -> tuple[np.ndarray, float, np.ndarray, str | None]:
    """Vecchia fit from ``start``: with :data:`WARM_START_NEIGHBOURS` by Fisher scoring and L-BFGS-B, then with all
    ``m`` by Fisher scoring (once more with sets searched again in the frame of the estimate for anisotropy).

    Returns ``theta``, ``-2 l``, the basis coefficients and the convergence warning of the last run
    (:func:`.minimiser.convergence_warning`).
    """
    bounds = parameter_bounds(layout, problem.internal_scales)
    theta = clamped(start, bounds)
    plan = plans.for_model(layout.unpack(theta), layout.anisotropy)
    runs = [plan.nearest(WARM_START_NEIGHBOURS)] if plan.size > WARM_START_NEIGHBOURS else []
    runs.append(plan)
    rounds = len(runs) + (1 if layout.anisotropy else 0)
    for round_index in range(rounds):
        if round_index == len(runs):
            runs.append(plans.for_model(layout.unpack(theta), layout.anisotropy))
        data = VecchiaData(problem.xy, problem.y, problem.basis, problem.method, runs[round_index],
                           problem.error_variance)
        objective = VecchiaObjective(data, layout, problem.should_stop)
        theta, result = _scoring_run(objective, theta, bounds, problem.max_iterations, polish=round_index == 0)
        if progress is not None:
            progress(0.5 + 0.5 * (round_index + 1) / rounds)
    terms = objective.terms(theta)
    return theta, terms.minus_two_log_likelihood, terms.basis_coefficients, convergence_warning(result)


def _scoring_run(objective: VecchiaObjective, theta: np.ndarray, bounds: list, max_iterations: int,
                 polish: bool) -> tuple[np.ndarray, optimize.OptimizeResult]:
    """Fisher scoring (:func:`.search.newton_steps` with the Vecchia information) from ``theta``, and with ``polish``
    L-BFGS-B after it (the first run of a fit, which may start far from the optimum, where scoring's steps are
    capped). Returns the estimate and the run's outcome as :func:`.minimiser.convergence_warning` reads it."""
    iterations = min(NEWTON_ITERATIONS, max_iterations)
    theta, converged = newton_steps(objective, theta, bounds, log_likelihood_tolerance=LOG_LIKELIHOOD_TOLERANCE,
                                    iterations=iterations)
    if polish:
        result = minimise(objective.value_and_gradient, theta, bounds, samples=len(objective.data.y),
                          log_likelihood_tolerance=LOG_LIKELIHOOD_TOLERANCE, gradient_tolerance=GRADIENT_TOLERANCE,
                          max_iterations=max_iterations)
        return result.x, result
    message = "converged" if converged else "Fisher scoring reached the iteration limit"
    return theta, optimize.OptimizeResult(x=theta, success=converged, nit=iterations, message=message)


def _candidate(problem: SearchProblem, layout: ParameterLayout, theta: np.ndarray, minus_two: float,
               stopped: str | None, units: str) -> CandidateFit:
    """A Vecchia fit in data units with its criteria and bound (and convergence) warnings."""
    model = problem.to_data_units(layout.unpack(theta))
    log_likelihood = problem.log_likelihood(minus_two)
    aic, bic, _ = information_criteria(problem, log_likelihood, layout)
    messages = bound_warnings(layout, layout.pack(model), parameter_bounds(layout, problem.data_scales), units)
    if stopped:
        messages.append(stopped)
    return CandidateFit(layout.family, layout.anisotropy, log_likelihood, aic, bic, model, messages)


def _two_scale_fit(problem: SearchProblem, single: ParameterLayout, theta: np.ndarray, nested: CandidateFit,
                   plans: _Plans, progress: Callable[[float], None] | None
                   ) -> tuple[ParameterLayout, tuple[np.ndarray, float, np.ndarray, str | None]]:
    """The two-structure Vecchia fit from the best start (by the Vecchia likelihood with
    :data:`WARM_START_NEIGHBOURS`, that of its first optimisation): the subset's two-structure fit ``nested``
    and, when it has the one-structure fit's family, :func:`.vecchia_scales.two_scale_starts`."""
    layout = ParameterLayout(nested.family, 2, nested.anisotropy, single.smoothness, single.nugget)
    subset_model = problem.to_internal_units(nested.covariance)
    starts = [subset_model]
    if nested.family == single.family and nested.anisotropy == single.anisotropy:
        starts += two_scale_starts(problem, single.unpack(theta), subset_model)
    plan = plans.for_model(subset_model, layout.anisotropy).nearest(WARM_START_NEIGHBOURS)
    data = VecchiaData(problem.xy, problem.y, problem.basis, problem.method, plan, problem.error_variance)
    scored = []
    for start in starts:
        packed = layout.pack(start)
        if layout.anisotropy:
            packed[layout.index("azimuth")] = math.radians(start.structures[0].azimuth)
        scored.append((data.evaluate(start).minus_two_log_likelihood, packed))
    best = min(scored, key=lambda pair: pair[0])[1]
    return layout, _optimise(problem, layout, best, plans, progress)


def fit_vecchia(xy: np.ndarray, values: np.ndarray, options: FitOptions, *, subset_size: int = SUBSET_SIZE,
                covariates: np.ndarray | None = None, progress: Callable[[float], None] | None = None,
                should_stop: Callable[[], bool] | None = None, error_variance: np.ndarray | None = None) -> FitResult:
    """Fit a covariance model to many samples with the Vecchia likelihood (see the module docstring).

    Parameters
    ----------
    xy, values : ndarray
        As for :func:`.fitting.fit_model`.
    options : FitOptions
        The settings of :func:`.fitting.fit_model` (``method`` "reml" or "ml"); ``likelihood_neighbours`` is the
        conditioning-set size ``m`` of the Vecchia likelihood.
    subset_size : int
        Samples of the exact fit that chooses the family (all if fewer).
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
        ``likelihood`` is ``"vecchia (m neighbours)"``; ``candidates`` holds the Vecchia fits compared (one, or
        one and two structures for ``kernel="auto"``).
    """
    kernel, method, neighbours = options.kernel, options.method, options.likelihood_neighbours
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
    compare_scales = kernel == "auto" and not options.nested
    share = 0.35 if compare_scales else 0.5
    subset = np.sort(np.random.default_rng(0).choice(n, min(subset_size, n), replace=False))
    subset_options = replace(options, mean=mean_model)
    subset_covariates = None if covariates is None else np.asarray(covariates)[subset]
    scales = (False, True) if compare_scales else (options.nested,)
    rough = [fit_exact(points[subset], observed[subset], replace(subset_options, nested=nested),
                       covariates=subset_covariates, should_stop=should_stop,
                       error_variance=None if error_variance is None else error_variance[subset],
                       progress=None if progress is None else (lambda f, k=k: progress(share * (k + f) / len(scales))))
             for k, nested in enumerate(scales)]
    chosen = min(rough[0].candidates, key=lambda c: c.aic)
    layout = ParameterLayout(chosen.family, len(chosen.covariance.structures), chosen.anisotropy, options.smoothness)
    problem = SearchProblem.standardise(points, observed - mean_model.known_mean(n), design, method,
                                        should_stop, options.max_iterations, options.nugget, error_variance)
    layout = ParameterLayout(chosen.family, len(chosen.covariance.structures), chosen.anisotropy, options.smoothness,
                             problem.nugget)
    start = layout.pack(problem.to_internal_units(chosen.covariance))
    stage = None if progress is None else (lambda f: progress(share + (0.65 - share) * (f - 0.5) / 0.5))
    plans = _Plans(problem.xy, neighbours)
    theta, minus_two, coefficients, stopped = _optimise(problem, layout, start, plans,
                                                        stage if compare_scales else progress)
    fits = [(_candidate(problem, layout, theta, minus_two, stopped, options.units), layout, coefficients)]
    if compare_scales:
        later = None if progress is None else (lambda f: progress(0.65 + 0.35 * (f - 0.5) / 0.5))
        subset_nested = min(rough[1].candidates, key=lambda c: c.aic)
        two, (theta2, minus_two2, coefficients2, stopped2) = _two_scale_fit(problem, layout, theta, subset_nested,
                                                                           plans, later)
        fits.append((_candidate(problem, two, theta2, minus_two2, stopped2, options.units), two, coefficients2))
    candidate, layout, basis_coefficients = min(fits, key=lambda fit: fit[0].aic)
    model = candidate.covariance
    _, _, k = information_criteria(problem, candidate.log_likelihood, layout)
    messages = data_warnings(points, model, options.units) + list(candidate.warnings)
    coefficients = problem.basis.coefficients(basis_coefficients) * problem.value_scale
    if progress is not None:
        progress(1.0)
    return FitResult(model, mean_model, coefficients, method, candidate.log_likelihood, candidate.aic, candidate.bic,
                     n, k, messages, likelihood=f"vecchia ({min(neighbours, n - 1)} neighbours)",
                     candidates=[fit[0] for fit in fits], fixed_nugget=options.nugget,
                     error_variance_field=None if error_variance is None else options.error_variance_field)
