"""One correlation model for several fields sampled at the same places (intrinsic correlation), fitted jointly.

Model. Under the intrinsic correlation model (Wackernagel 2003, *Multivariate
Geostatistics*, 3rd ed., chapter 22; Journel & Huijbregts 1978, *Mining
Geostatistics*) the covariance of every field ``f`` is its own scale times one
covariance model ``R`` (structures and nugget; its overall scale is
arbitrary)::

    C_f(h) = c_f R(h)

So the kriging weights of every field are the same, and so is its kriging
variance up to the factor ``c_f``: one factorisation serves all the fields.

Fit. The fields' log-likelihoods are summed, as if the fields were
independent (a composite likelihood, Varin, Reid & Firth 2011, *Statistica
Sinica* 21, 5-42: correlation between the fields leaves the estimate of ``R``
consistent and affects only its precision), and each field's scale is
profiled out. With ``P`` as in :mod:`.likelihood`, ``q_f = y_f^T P y_f``,
``M = n - p`` for REML (``n`` for ML, without the ``log|F^T R^-1 F|`` term)
and ``m`` fields::

    -2 l(R) = sum_f [M log(2 pi) + log|R| + log|F^T R^-1 F| + M log(q_f / M) + M],   c_f = q_f / M

    d(-2 l)/dtheta = tr((m W - sum_f (M / q_f) a_f a_f^T) dR/dtheta),   a_f = P y_f

(``W = P`` for REML, ``R^-1`` for ML; one field gives the profiled form of the
single-field likelihood). The profile makes ``-2 l`` blind to the scale of
``R``, so the first partial sill is held at 1 and the other parameters are
optimised by L-BFGS-B on the bounded log scale of :mod:`..model.parameters` (bounds
relative to that unit), with coordinates in the fitter's internal units
(:class:`.fit_search.SearchProblem`) and each field divided by the root mean
square of its residual from the least-squares mean.

Start. :func:`.fitting.fit_with` fits the average of the standardised fields
(each field minus any known mean, divided by its residual root mean square);
under the model that average has covariance proportional to ``R`` too, so it
chooses the family (``kernel="auto"``), the anisotropy and the start of ``R``.

The exact likelihood is used, so the joint fit takes at most
:data:`.fitting.VECCHIA_THRESHOLD` samples.
"""
from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import replace

import numpy as np

from ..errors import FieldcastError
from ..io.samples import check_samples
from ..model.covariance import CovarianceModel
from ..model.mean import MeanModel
from ..model.parameters import DataScales, ParameterLayout, covariance_derivatives, parameter_bounds
from .bound_warnings import bound_warnings
from .data_warnings import data_warnings
from .fitting import VECCHIA_THRESHOLD, fit_with
from .likelihood import LOG_2PI, GlsSolution, LikelihoodTerms, MeanBasis, PairedObjective, evaluate_model
from .minimiser import convergence_warning, minimise
from .options import CandidateFit, FitOptions, FitResult, information_criteria, mean_model_for, with_jitter_in_nugget
from .search import GRADIENT_TOLERANCE, LOG_LIKELIHOOD_TOLERANCE, SearchProblem

START_SHARE = 0.5
"""Share of the progress bar taken by the start fit on the averaged field."""

class JointObjective(PairedObjective):
    """Profiled ``-2 l`` of several fields with one covariance model, and its gradient (module docstring).

    Parameters are those of :class:`.likelihood.PairedObjective`, with ``y`` of
    shape (n, m): one column per field, each divided by its own scale.
    """

    def field_scales(self, theta: np.ndarray) -> np.ndarray:
        """``c_f = q_f / M`` of every field for the model ``theta`` (units of the columns of ``y``, squared)."""
        model = self.layout.unpack(theta)
        solution = GlsSolution.solve(self._matrix(model.covariance_from_offsets(self.dx, self.dy), model.sill),
                                     self.y, self.basis)
        return np.einsum("ij,ij->j", self.y, solution.weights) / self.basis.contrasts(self.method)

    def value_and_gradient(self, theta: np.ndarray) -> tuple[float, np.ndarray]:
        """``-2 l`` with every field's scale profiled out, and its gradient with respect to ``theta``."""
        self._check_stop()
        model = self.layout.unpack(theta)
        pair_covariance, derivatives = covariance_derivatives(self.layout, model, self.dx, self.dy)
        solution = GlsSolution.solve(self._matrix(pair_covariance, model.sill), self.y, self.basis)
        self.jitter = solution.jitter
        contrasts, fields = self.basis.contrasts(self.method), self.y.shape[1]
        quadratic = np.einsum("ij,ij->j", self.y, solution.weights)
        log_det_gram = solution.log_det_gram if self.method == "reml" else 0.0
        value = (fields * (contrasts * LOG_2PI + solution.log_det_k + log_det_gram)
                 + float(np.sum(contrasts * np.log(quadratic / contrasts) + contrasts)))
        precision = solution.precision(self.method)
        scaled = solution.weights * np.sqrt(contrasts / quadratic)  # sum_f (M / q_f) a_f a_f^T = scaled scaled^T
        pair_weights = fields * precision.take(self.pairs) - (scaled @ scaled.T).take(self.pairs)
        pair_weights *= 2.0
        terms = LikelihoodTerms(value, solution.weights, solution.basis_coefficients, pair_weights,
                                float(fields * np.trace(precision) - np.sum(scaled * scaled)), precision,
                                solution.jitter)
        return value, self.gradient(model, derivatives, terms)


def fit_shared(xy: np.ndarray, values: np.ndarray, options: FitOptions,
               names: list[str] | None = None, *, covariates: np.ndarray | None = None,
               progress: Callable[[float], None] | None = None,
               should_stop: Callable[[], bool] | None = None) -> list[FitResult]:
    """Fit one correlation model, with its own scale per field, to fields sampled at the same places.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations in a projected CRS (CRS units).
    values : ndarray of shape (n, m)
        One column per field, in the modelling scale; not modified.
    options : FitOptions
        As for :func:`.fitting.fit_model`; ``method`` "reml" or "ml", and a
        mean of any kind but "known" (whose value could not differ between fields).
    names : list of str, optional
        Field names for messages, one per column.
    covariates : ndarray of shape (n, k), optional
        External-drift columns for the mean, the same for every field.
    progress, should_stop : callable, optional
        Progress fraction in [0, 1]; cancel request (raises ``Cancelled``).

    Returns
    -------
    list of FitResult
        One per field: the shared model times the field's scale (ranges in CRS
        units, variances in the field's units squared), its GLS mean
        coefficients and its own log-likelihood at that model; ``likelihood``
        says the model is shared.
    """
    values = np.asarray(values, dtype=float)
    names = _checked_fields(xy, values, options, names)
    xy = np.asarray(xy, dtype=float)
    mean_model = mean_model_for(options.mean, xy, covariates, options.known_mean)
    design = mean_model.design(xy, covariates)
    column_scales = _column_scales(values, MeanBasis.from_design(design), names)
    standardised = values / column_scales
    average = standardised.mean(axis=1)
    start = fit_with(xy, average, options, covariates=covariates, progress=_part(progress, 0.0, START_SHARE),
                     should_stop=should_stop)
    layout = _start_layout(start, options)
    problem = SearchProblem.standardise(xy, average, design, options.method, should_stop)
    objective = JointObjective(problem.xy, standardised, problem.basis, options.method, layout, should_stop)
    internal_start = problem.to_internal_units(start.covariance)
    theta, failure = _refine(objective, layout, layout.pack(internal_start.scaled(
        1.0 / internal_start.structures[0].partial_sill)), problem.internal_scales,
        _part(progress, START_SHARE, 1.0), options.max_iterations)
    shared = layout.unpack(theta)
    messages = [] if failure is None else [
        f"Joint fit of the shared model: {failure} The model may be off its best: turn off 'One correlation model "
        "for all fields' (SHARED_MODEL) for a model per field, or choose fewer FIELDS."]
    scales = objective.field_scales(theta) * column_scales ** 2
    results = [_field_result(xy, column, covariates, replace(problem, value_scale=math.sqrt(scale)), shared,
                             mean_model, options, layout, len(names), messages)
               for column, scale in zip(values.T, scales)]
    if progress is not None:
        progress(1.0)
    return results


def _checked_fields(xy: np.ndarray, values: np.ndarray, options: FitOptions, names: list[str] | None) -> list[str]:
    """The field names (given or numbered), after refusing what a shared fit cannot take."""
    if values.ndim != 2 or values.shape[1] < 1:
        raise FieldcastError("Give the fields as an (n, m) array: one column of values per field.")
    names = names or [f"field {i + 1}" for i in range(values.shape[1])]
    if len(names) != values.shape[1]:
        raise FieldcastError(f"Got {len(names)} field names for {values.shape[1]} columns of values; give one "
                             "name per field.")
    if options.method not in ("reml", "ml"):
        raise FieldcastError("A model shared by several fields is fitted by likelihood: choose METHOD reml or ml, "
                             "or turn off 'One correlation model for all fields' (SHARED_MODEL) to fit each field "
                             "by itself.")
    if options.nugget is not None:
        raise FieldcastError("A fixed NUGGET is in one field's units, but a model shared by several fields takes "
                             "each field's own scale: leave NUGGET empty, or turn off 'One correlation model for all "
                             "fields' (SHARED_MODEL) to fit each field by itself.")
    if (options.mean.kind if isinstance(options.mean, MeanModel) else options.mean) == "known":
        raise FieldcastError("A shared model needs a mean estimated from each field (constant, linear or "
                             "quadratic); a known mean would be the same number for every field.")
    if len(values) > VECCHIA_THRESHOLD:
        raise FieldcastError(f"A model shared by several fields is fitted with the exact likelihood, for up to "
                             f"{VECCHIA_THRESHOLD:,} samples; there are {len(values):,}. Fit one model per field "
                             "instead, or thin the samples.")
    for column, name in zip(values.T, names):
        try:
            check_samples(xy, column)
        except FieldcastError as exc:
            raise FieldcastError(f"{name}: {exc}") from None
    return names


def _column_scales(values: np.ndarray, basis: MeanBasis, names: list[str]) -> np.ndarray:
    """Root mean square of each column's residual from the least-squares mean."""
    scales = basis.residual_rms(values)
    for name, scale in zip(names, scales):
        if not scale > 0:
            raise FieldcastError(f"The mean model reproduces {name} exactly, leaving nothing for a covariance "
                                 "model; leave that field out or choose a simpler mean model.")
    return scales


def _start_layout(start: FitResult, options: FitOptions) -> ParameterLayout:
    """The parameter layout of the model :func:`.fitting.fit_model` chose for the averaged field."""
    chosen = min(start.candidates, key=lambda candidate: candidate.aic)
    return ParameterLayout(chosen.family, len(start.covariance.structures), chosen.anisotropy,
                           options.smoothness if chosen.family == "matern" else None)


def _part(progress: Callable[[float], None] | None, low: float, high: float) -> Callable[[float], None] | None:
    """``progress`` mapped onto ``[low, high]``."""
    if progress is None:
        return None
    return lambda fraction: progress(low + fraction * (high - low))


def _refine(objective: JointObjective, layout: ParameterLayout, theta: np.ndarray, scales: DataScales,
            progress: Callable[[float], None] | None, max_iterations: int) -> tuple[np.ndarray, str | None]:
    """Minimise the joint ``-2 l`` over every parameter but the first partial sill (held where ``theta`` has it).

    Returns the optimum and, when L-BFGS-B did not converge, the :func:`.minimiser.convergence_warning`
    (None otherwise). :func:`.minimiser.minimise` divides the objective by ``2 n m``, so that its
    tolerances are those of a single-field fit.
    """
    fixed = layout.index("log_partial_sill_1")
    free = np.array([i for i in range(layout.n_parameters) if i != fixed])
    bounds = [parameter_bounds(layout, scales)[i] for i in free]
    iterations = [0]

    def full(x: np.ndarray) -> np.ndarray:
        vector = theta.copy()
        vector[free] = x
        return vector

    def minus_two_log_likelihood(x: np.ndarray) -> tuple[float, np.ndarray]:
        value, gradient = objective.value_and_gradient(full(x))
        return value, gradient[free]

    def advance(_: np.ndarray) -> None:
        iterations[0] += 1
        if progress is not None:
            progress(min(iterations[0] / 50.0, 1.0))

    n, m = objective.y.shape[0], objective.y.size // objective.y.shape[0]
    result = minimise(minus_two_log_likelihood, theta[free], bounds, samples=n, fields=m,
                      log_likelihood_tolerance=LOG_LIKELIHOOD_TOLERANCE, gradient_tolerance=GRADIENT_TOLERANCE,
                      max_iterations=max_iterations, callback=advance)
    return full(result.x), convergence_warning(result)


def _field_result(xy: np.ndarray, values: np.ndarray, covariates: np.ndarray | None, field: SearchProblem,
                  shared: CovarianceModel, mean_model: MeanModel, options: FitOptions, layout: ParameterLayout,
                  fields: int, shared_messages: list[str]) -> FitResult:
    """One field's FitResult: the shared model at its scale, its GLS coefficients and log-likelihood.

    ``field`` is the internal problem with the field's scale as value scale, so that its
    :meth:`~.fit_search.SearchProblem.to_data_units` and data scales turn the shared internal model
    and its bounds into the field's units (bound warnings then quote the field's numbers). Its warnings are
    those of a single-field fit: what the samples resolve (:func:`.data_warnings.data_warnings`), parameters at
    a bound, then ``shared_messages``; distances in them are in ``options.units``.
    """
    covariance = field.to_data_units(shared)
    evaluation = evaluate_model(xy, values, covariance, mean_model, field.method, covariates)
    messages = data_warnings(xy, covariance, options.units) + bound_warnings(
        layout, layout.pack(covariance), parameter_bounds(layout, field.data_scales), options.units)
    messages += shared_messages
    covariance = with_jitter_in_nugget(covariance, evaluation.jitter, messages)
    aic, bic, k = information_criteria(field, evaluation.log_likelihood, layout)
    likelihood = f"exact; one correlation model shared by {fields} fields (joint {field.method.upper()})"
    candidate = CandidateFit(layout.family, layout.anisotropy, evaluation.log_likelihood, aic, bic, covariance,
                             list(messages))
    return FitResult(covariance, mean_model, evaluation.coefficients, options.method, evaluation.log_likelihood,
                     aic, bic, len(values), k, messages, likelihood, [candidate])
