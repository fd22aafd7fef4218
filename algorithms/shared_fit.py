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
``R``, so the first partial sill is held at its start value and the other
parameters are optimised by L-BFGS-B on the bounded log scale of
:mod:`.parameters`, in the fitter's internal units
(:class:`.fit_search.SearchProblem`).

Start. :func:`.fitting.fit_model` fits the average of the standardised fields
(each field minus any known mean, divided by its residual root mean square);
under the model that average has covariance proportional to ``R`` too, so it
chooses the family (``kernel="auto"``), the anisotropy and the start of ``R``.

The exact likelihood is used, so the joint fit takes at most
:data:`.fitting.VECCHIA_THRESHOLD` samples.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace

import numpy as np
from scipy import optimize

from .covariance import CovarianceModel
from .errors import FieldcastError
from .fit_search import SearchProblem
from .fit_warnings import bound_warnings
from .fitting import (
    VECCHIA_THRESHOLD,
    CandidateFit,
    FitOptions,
    FitResult,
    fit_model,
    information_criteria,
    mean_model_for,
    with_jitter_in_nugget,
)
from .likelihood import LOG_2PI, GlsSolution, LikelihoodObjective, LikelihoodTerms, evaluate_model
from .parameters import DataScales, ParameterLayout, covariance_derivatives, parameter_bounds
from .samples import check_samples

START_SHARE = 0.5
"""Share of the progress bar taken by the start fit on the averaged field."""

MAX_ITERATIONS = 200
"""Iteration limit of the joint L-BFGS-B refinement."""


class JointObjective(LikelihoodObjective):
    """Profiled ``-2 l`` of several fields with one covariance model, and its gradient (module docstring).

    ``y`` is (n, m): one column per field, in the internal units of the problem.
    """

    def contrasts(self) -> int:
        """``M``: ``n - p`` for REML, ``n`` for ML."""
        n, p = self.basis.q.shape
        return n - p if self.method == "reml" else n

    def field_scales(self, theta: np.ndarray) -> np.ndarray:
        """``c_f = q_f / M`` of every field for the model ``theta`` (internal units)."""
        model = self.layout.unpack(theta)
        solution = GlsSolution.solve(self._matrix(model.covariance_from_offsets(self.dx, self.dy), model.sill),
                                     self.y, self.basis)
        return np.einsum("ij,ij->j", self.y, solution.weights) / self.contrasts()

    def value_and_gradient(self, theta: np.ndarray) -> tuple[float, np.ndarray]:
        """``-2 l`` with every field's scale profiled out, and its gradient with respect to ``theta``."""
        self._check_stop()
        model = self.layout.unpack(theta)
        pair_covariance, derivatives = covariance_derivatives(self.layout, model, self.dx, self.dy)
        solution = GlsSolution.solve(self._matrix(pair_covariance, model.sill), self.y, self.basis)
        self.jitter = solution.jitter
        contrasts, fields = self.contrasts(), self.y.shape[1]
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


def _start_layout(start: FitResult, options: FitOptions) -> ParameterLayout:
    """The parameter layout of the model :func:`.fitting.fit_model` chose for the averaged field."""
    chosen = min(start.candidates, key=lambda candidate: candidate.aic)
    smoothness = None if chosen.family == "matern" and options.smoothness is None else options.smoothness
    return ParameterLayout(chosen.family, len(start.covariance.structures), chosen.anisotropy,
                           smoothness if chosen.family == "matern" else None)


def _standardised_columns(y: np.ndarray, design: np.ndarray) -> np.ndarray:
    """Root mean square of each column's residual from the least-squares mean (FieldcastError if 0)."""
    q, _ = np.linalg.qr(design) if design.shape[1] else (np.zeros((len(y), 0)), None)
    residual = y - q @ (q.T @ y)
    scales = np.sqrt(np.mean(residual ** 2, axis=0))
    if not np.all(scales > 0):
        raise FieldcastError("The mean model reproduces one of the fields exactly, leaving nothing for a "
                             "covariance model; leave that field out or choose a simpler mean model.")
    return scales


def fit_shared(xy: np.ndarray, values: np.ndarray, options: FitOptions,
               names: list[str] | None = None) -> list[FitResult]:
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
        Field names for messages.

    Returns
    -------
    list of FitResult
        One per field: the shared model times the field's scale (ranges in CRS
        units, variances in the field's units squared), its GLS mean
        coefficients and its own log-likelihood at that model; ``likelihood``
        says the model is shared.
    """
    values = np.asarray(values, dtype=float)
    if values.ndim != 2 or values.shape[1] < 1:
        raise FieldcastError("Give the fields as an (n, m) array: one column of values per field.")
    names = names or [f"field {i + 1}" for i in range(values.shape[1])]
    if options.method not in ("reml", "ml"):
        raise FieldcastError("A model shared by several fields is fitted by likelihood; choose method 'reml' or "
                             "'ml'.")
    if (options.mean.kind if not isinstance(options.mean, str) else options.mean) == "known":
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
    xy = np.asarray(xy, dtype=float)
    mean_model = mean_model_for(options.mean, xy, options.covariates, options.known_mean)
    design = mean_model.design(xy, options.covariates)
    column_scales = _standardised_columns(values, design)
    standardised = values / column_scales
    progress = options.progress
    start = fit_model(xy, standardised.mean(axis=1), **{**_fit_arguments(options), "progress": _part(progress, 0.0,
                                                                                                     START_SHARE)})
    layout = _start_layout(start, options)
    problem = SearchProblem.standardise(xy, standardised.mean(axis=1), design, options.method, options.should_stop)
    objective = JointObjective(problem.xy, standardised, problem.basis, options.method, layout, options.should_stop)
    theta = _refine(objective, layout, layout.pack(_to_internal(start.covariance, problem)), problem.internal_scales,
                    _part(progress, START_SHARE, 1.0))
    shared = layout.unpack(theta)
    scales = objective.field_scales(theta) * column_scales ** 2
    results = [_field_result(xy, column, _in_data_units(shared, problem.length_scale, scale), mean_model, options,
                             problem, layout, len(names), objective.jitter)
               for column, scale in zip(values.T, scales)]
    if progress is not None:
        progress(1.0)
    return results


def _fit_arguments(options: FitOptions) -> dict:
    """Keyword arguments of :func:`.fitting.fit_model` for ``options``."""
    return {"kernel": options.kernel, "anisotropy": options.anisotropy, "mean": options.mean,
            "method": options.method, "covariates": options.covariates, "nested": options.nested,
            "smoothness": options.smoothness, "known_mean": options.known_mean, "should_stop": options.should_stop}


def _part(progress: Callable[[float], None] | None, low: float, high: float) -> Callable[[float], None] | None:
    """``progress`` mapped onto ``[low, high]``."""
    if progress is None:
        return None
    return lambda fraction: progress(low + fraction * (high - low))


def _to_internal(model: CovarianceModel, problem: SearchProblem) -> CovarianceModel:
    """Ranges divided by the length scale, variances by the value scale squared (inverse of ``to_data_units``)."""
    shrunk = tuple(replace(s, range=s.range / problem.length_scale) for s in model.structures)
    return CovarianceModel(shrunk, model.nugget).scaled(problem.value_scale ** -2)


def _in_data_units(model: CovarianceModel, length_scale: float, variance_scale: float) -> CovarianceModel:
    """Ranges times ``length_scale``, variances times ``variance_scale``."""
    stretched = tuple(replace(s, range=s.range * length_scale) for s in model.structures)
    return CovarianceModel(stretched, model.nugget).scaled(variance_scale)


def _refine(objective: JointObjective, layout: ParameterLayout, theta: np.ndarray, scales: DataScales,
            progress: Callable[[float], None] | None) -> np.ndarray:
    """Minimise the joint ``-2 l`` over every parameter but the first partial sill (held at its start value)."""
    fixed = layout.index("log_partial_sill_1")
    free = np.array([i for i in range(layout.n_parameters) if i != fixed])
    bounds = [parameter_bounds(layout, scales)[i] for i in free]
    iterations = [0]

    def full(x: np.ndarray) -> np.ndarray:
        vector = theta.copy()
        vector[free] = x
        return vector

    def value_and_gradient(x: np.ndarray) -> tuple[float, np.ndarray]:
        value, gradient = objective.value_and_gradient(full(x))
        return value, gradient[free]

    def advance(_: np.ndarray) -> None:
        iterations[0] += 1
        if progress is not None:
            progress(min(iterations[0] / 50.0, 1.0))

    start = np.clip(theta[free], [b[0] if b[0] is not None else -np.inf for b in bounds],
                    [b[1] if b[1] is not None else np.inf for b in bounds])
    result = optimize.minimize(value_and_gradient, start, jac=True, method="L-BFGS-B", bounds=bounds,
                               callback=advance, options={"maxiter": MAX_ITERATIONS})
    return full(result.x)


def _field_result(xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean_model, options: FitOptions,
                  problem: SearchProblem, layout: ParameterLayout, fields: int, jitter: float) -> FitResult:
    """One field's FitResult: the shared model at its scale, its GLS coefficients and log-likelihood."""
    evaluation = evaluate_model(xy, values, covariance, mean_model, problem.method, options.covariates)
    scales = replace(problem.data_scales, variance=float(np.var(values)))
    messages = bound_warnings(layout, layout.pack(covariance), parameter_bounds(layout, scales))
    covariance = with_jitter_in_nugget(covariance, evaluation.jitter, messages)
    aic, bic, k = information_criteria(problem, evaluation.log_likelihood, layout)
    likelihood = f"exact; one correlation model shared by {fields} fields (joint {problem.method.upper()})"
    candidate = CandidateFit(layout.family, layout.anisotropy, evaluation.log_likelihood, aic, bic, covariance,
                             list(messages))
    return FitResult(covariance, mean_model, evaluation.coefficients, options.method, evaluation.log_likelihood,
                     aic, bic, len(values), k, messages, likelihood, [candidate])

