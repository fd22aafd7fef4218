"""Fit a covariance model to samples: REML (default), ML or a weighted-least-squares variogram fit.

Likelihood fits maximise the exact log-likelihood of :mod:`.likelihood`
over the bounded log-space parameters of :mod:`..model.parameters` with L-BFGS-B
(scipy) and the analytic gradient. For conditioning the fit works
internally on coordinates centred on the bounding box and divided by its
diagonal, and on values (minus any known mean) divided by the
root-mean-square residual of the least-squares (OLS) trend; the result is
converted back, so ranges are in CRS units and variances in the units of
the values given, squared. The search itself (starts, screening, warm
starts on a subset for large data) is described in :mod:`.search`.

``method="wls"`` fits the variogram of the OLS residuals by weighted least
squares (:func:`.variogram.fit_wls`) and evaluates the REML log-likelihood
at that model, so its AIC and BIC can be compared with likelihood fits.

Model comparison (every result): ``AIC = -2 l + 2 k`` and
``BIC = -2 l + k log(m)``. For ML, ``k`` counts the covariance parameters
plus the ``p`` mean coefficients and ``m = n``; for REML (and the WLS fit,
whose log-likelihood is the REML one at the fitted model) ``k`` counts
the covariance parameters only and ``m = n - p``, the number of error
contrasts, so REML criteria compare models with the same mean only.
``kernel="auto"`` compares exponential, spherical, gaussian, matern32 and
matern52, each isotropic and (if ``anisotropy``) anisotropic, and keeps the
lowest AIC. The general Matérn is left out of "auto": with its free
smoothness it needs finite differences of Bessel functions at every step,
costs several times more, and the exponential (``nu = 1/2``), matern32,
matern52 and gaussian (``nu -> infinity``) already span its range.
"""
from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from ..errors import Cancelled, FieldcastError
from ..io.samples import check_samples
from ..linalg.blas_threads import single_blas_thread
from ..model.correlation import SMOOTHNESS_BOUNDS
from ..model.covariance import CovarianceModel
from ..model.mean import MEAN_KINDS, MeanModel
from ..model.parameters import ParameterLayout, parameter_bounds
from .bound_warnings import bound_warnings
from .likelihood import evaluate_model, jitter_message
from .search import ProgressSteps, SearchFit, SearchProblem, fit_family, planned_steps
from .variogram import fit_wls

FIT_METHODS = ("reml", "ml", "wls")
"""Fitting methods: restricted likelihood, full likelihood, weighted least squares on the variogram."""

KERNEL_CHOICES = ("auto", "exponential", "spherical", "gaussian", "matern32", "matern52", "matern")
"""Covariance families a fit may use; "auto" compares the five closed-form families by AIC."""

VECCHIA_THRESHOLD = 2000
"""Above this many samples, likelihood fits use the Vecchia approximation (:mod:`.vecchia_fit`), whose
cost grows about linearly with n; up to it, the exact likelihood (cost n^3)."""

SINGLE_THREAD_LIMIT = 1000
"""Up to this many samples the exact fit runs its small solves on one BLAS thread (:mod:`..linalg.blas_threads`)."""

AUTO_FAMILIES = ("exponential", "spherical", "gaussian", "matern32", "matern52")
"""Families compared by ``kernel="auto"``."""


@dataclass
class CandidateFit:
    """One fitted model among those compared.

    Attributes
    ----------
    family : str
    anisotropy : bool
        Whether ratio and azimuth were estimated.
    log_likelihood, aic, bic : float
        See the module docstring.
    covariance : CovarianceModel
        Ranges in CRS units, variances in value units squared.
    warnings : list of str
        Plain-words warnings about this fit (e.g. an estimate on a bound).
    """

    family: str
    anisotropy: bool
    log_likelihood: float
    aic: float
    bic: float
    covariance: CovarianceModel
    warnings: list[str] = field(default_factory=list)

    def summary(self) -> dict:
        """JSON-ready row of the candidates table."""
        return {"family": self.family, "anisotropy": self.anisotropy, "log_likelihood": self.log_likelihood,
                "aic": self.aic, "bic": self.bic}


@dataclass
class FitResult:
    """The chosen model and how it was found.

    Attributes
    ----------
    covariance : CovarianceModel
    mean : MeanModel
    coefficients : ndarray
        GLS estimates of the mean coefficients (order of ``mean.term_names``).
    method : str
        One of :data:`FIT_METHODS`.
    log_likelihood, aic, bic : float
        Of the chosen model (REML log-likelihood for "wls").
    n : int
        Number of samples.
    n_parameters : int
        ``k`` used in AIC and BIC.
    warnings : list of str
    likelihood : str
        "exact", or "vecchia (m neighbours)" above :data:`VECCHIA_THRESHOLD` samples.
    candidates : list of CandidateFit
        Every model compared, the chosen one included.
    """

    covariance: CovarianceModel
    mean: MeanModel
    coefficients: np.ndarray
    method: str
    log_likelihood: float
    aic: float
    bic: float
    n: int
    n_parameters: int
    warnings: list[str]
    likelihood: str = "exact"
    candidates: list[CandidateFit] = field(default_factory=list)

    def summary(self) -> dict:
        """JSON-ready facts of the fit, for ``ModelDocument.fit``."""
        return {
            "method": self.method,
            "likelihood": self.likelihood,
            "likelihood_method": "ml" if self.method == "ml" else "reml",
            "log_likelihood": float(self.log_likelihood),
            "aic": float(self.aic),
            "bic": float(self.bic),
            "n": int(self.n),
            "n_parameters": int(self.n_parameters),
            "warnings": list(self.warnings),
            "candidates": [c.summary() for c in self.candidates],
        }


def information_criteria(problem: SearchProblem, log_likelihood: float,
                         layout: ParameterLayout) -> tuple[float, float, int]:
    """AIC, BIC and the parameter count ``k`` (see the module docstring)."""
    k = layout.n_parameters + (problem.basis.q.shape[1] if problem.method == "ml" else 0)
    return -2.0 * log_likelihood + 2 * k, -2.0 * log_likelihood + k * math.log(problem.contrasts), k


def _candidate(problem: SearchProblem, fit: SearchFit) -> CandidateFit:
    """A likelihood fit converted to data units, with its criteria and warnings."""
    model = problem.to_data_units(fit.layout.unpack(fit.theta))
    log_likelihood = problem.log_likelihood(fit.minus_two_log_likelihood)
    aic, bic, _ = information_criteria(problem, log_likelihood, fit.layout)
    bounds = parameter_bounds(fit.layout, problem.data_scales)
    messages = bound_warnings(fit.layout, fit.layout.pack(model), bounds)
    if fit.jitter:
        messages.append(jitter_message(fit.jitter * problem.value_scale ** 2))
    return CandidateFit(fit.layout.family, fit.layout.anisotropy, log_likelihood, aic, bic, model, messages)


def mean_model_for(mean: str | MeanModel, xy: np.ndarray, covariates: np.ndarray | None,
                known_mean: float) -> MeanModel:
    """The mean model to fit, checked against the covariates given."""
    if isinstance(mean, MeanModel):
        if covariates is not None and not mean.covariate_names:
            raise FieldcastError("Covariates were given but the mean model names none; add their names to it.")
        return mean
    if mean not in MEAN_KINDS:
        raise FieldcastError(f"Unknown mean model {mean!r}; choose one of {', '.join(MEAN_KINDS)}.")
    names = ()
    if covariates is not None:
        count = np.asarray(covariates).reshape(len(xy), -1).shape[1]
        names = tuple(f"covariate_{i + 1}" for i in range(count))
    return MeanModel.for_data(mean, xy, names, known_value=known_mean)


def check_fit_choices(kernel: str, method: str, nested: bool, smoothness: float | None) -> None:
    """FieldcastError for an unknown method or kernel, or settings that do not go together."""
    if method not in FIT_METHODS:
        raise FieldcastError(f"Unknown fitting method {method!r}; choose one of {', '.join(FIT_METHODS)}.")
    if kernel not in KERNEL_CHOICES:
        raise FieldcastError(f"Unknown kernel {kernel!r}; choose one of {', '.join(KERNEL_CHOICES)}.")
    if smoothness is not None:
        low, high = SMOOTHNESS_BOUNDS
        if kernel != "matern":
            raise FieldcastError("A smoothness applies to the 'matern' kernel only; choose that kernel or leave "
                                 "the smoothness empty.")
        if not low <= smoothness <= high:
            raise FieldcastError(f"The Matérn smoothness must be between {low} and {high}; got {smoothness!r}.")
    if nested and method == "wls":
        raise FieldcastError("Nested structures are fitted by likelihood only; choose method 'reml' or 'ml', "
                             "or turn nested off.")


def _wls_candidates(xy: np.ndarray, values: np.ndarray, mean: MeanModel, covariates: np.ndarray | None,
                    layouts: list[ParameterLayout], problem: SearchProblem,
                    steps: ProgressSteps) -> list[tuple[CandidateFit, ParameterLayout]]:
    """Variogram fits by weighted least squares, scored by the REML log-likelihood at the fitted model."""
    residual = (problem.y - problem.basis.q @ (problem.basis.q.T @ problem.y)) * problem.value_scale
    scored = []
    for layout in layouts:
        if problem.should_stop is not None and problem.should_stop():
            raise Cancelled("Fitting was cancelled.")
        model = fit_wls(xy, residual, layout.family, anisotropy=layout.anisotropy, smoothness=layout.smoothness)
        evaluation = evaluate_model(xy, values, model, mean, "reml", covariates)
        aic, bic, _ = information_criteria(problem, evaluation.log_likelihood, layout)
        messages = [jitter_message(evaluation.jitter)] if evaluation.jitter else []
        scored.append((CandidateFit(layout.family, layout.anisotropy, evaluation.log_likelihood, aic, bic, model,
                                    messages), layout))
        steps.advance()
    return scored


@dataclass(frozen=True)
class FitOptions:
    """The settings of one fit, as :func:`fit_model` takes them (see its parameters)."""

    kernel: str = "auto"
    anisotropy: bool = True
    mean: str | MeanModel = "constant"
    method: str = "reml"
    covariates: np.ndarray | None = None
    nested: bool = False
    smoothness: float | None = None
    known_mean: float = 0.0
    progress: Callable[[float], None] | None = None
    should_stop: Callable[[], bool] | None = None


def fit_model(
    xy: np.ndarray,
    values: np.ndarray,
    *,
    kernel: str = "auto",
    anisotropy: bool = True,
    mean: str | MeanModel = "constant",
    method: str = "reml",
    covariates: np.ndarray | None = None,
    nested: bool = False,
    smoothness: float | None = None,
    known_mean: float = 0.0,
    progress: Callable[[float], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> FitResult:
    """Fit a covariance model (and the GLS mean coefficients) to samples.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations in a projected CRS (CRS units, e.g. metres).
    values : ndarray of shape (n,)
        Values in the modelling scale; not modified.
    kernel : str
        One of :data:`KERNEL_CHOICES`; "auto" keeps the lowest-AIC model of
        :data:`AUTO_FAMILIES`.
    anisotropy : bool
        Estimate a geometric anisotropy (azimuth, minor/major ratio); with
        "auto" both isotropic and anisotropic models are compared.
    mean : str or MeanModel
        A kind of :data:`.mean.MEAN_KINDS` (framed on the data) or a model.
    method : str
        "reml" (default), "ml" or "wls" (see the module docstring).
    covariates : ndarray of shape (n, k), optional
        External-drift columns for the mean.
    nested : bool
        Two structures of the family, a short- and a long-range one.
    smoothness : float, optional
        Fixed Matérn ``nu`` for kernel "matern"; None fits it in [0.2, 5].
    known_mean : float
        The mean for ``mean="known"`` (value units).
    progress, should_stop : callable, optional
        Progress fraction in [0, 1]; cancel request (raises ``Cancelled``).

    Returns
    -------
    FitResult
        Ranges in CRS units, variances in value units squared.
    """
    options = FitOptions(kernel, anisotropy, mean, method, covariates, nested, smoothness, known_mean, progress,
                         should_stop)
    if method != "wls" and len(values) > VECCHIA_THRESHOLD:
        from .vecchia_fit import fit_vecchia  # imported here: vecchia_fit builds on this module

        return fit_vecchia(xy, values, options)
    with single_blas_thread(len(values) <= SINGLE_THREAD_LIMIT):
        return fit_exact(xy, values, options)


def with_jitter_in_nugget(covariance: CovarianceModel, jitter: float, messages: list[str]) -> CovarianceModel:
    """The model with a factorisation's diagonal jitter added to its nugget, said in ``messages`` (appended to).

    Kriging then factorises the same matrix the likelihood did.
    """
    if not jitter:
        return covariance
    if not any("positive definite" in m for m in messages):
        messages.append(jitter_message(jitter))
    messages.append(f"The model's nugget includes that {jitter:.3g}, so predictions use the same covariance matrix "
                    "as the fit.")
    return CovarianceModel(covariance.structures, covariance.nugget + jitter)


def fit_exact(xy: np.ndarray, values: np.ndarray, options: FitOptions) -> FitResult:
    """:func:`fit_model` with the exact likelihood whatever the number of samples."""
    kernel, anisotropy, mean, method, covariates, nested, smoothness, known_mean, progress, should_stop = (
        options.kernel, options.anisotropy, options.mean, options.method, options.covariates, options.nested,
        options.smoothness, options.known_mean, options.progress, options.should_stop)
    check_fit_choices(kernel, method, nested, smoothness)
    check_samples(xy, values)
    xy = np.asarray(xy, dtype=float)
    values = np.asarray(values, dtype=float)
    mean_model = mean_model_for(mean, xy, covariates, known_mean)
    y = values - mean_model.known_mean(len(values))
    problem = SearchProblem.standardise(xy, y, mean_model.design(xy, covariates), "ml" if method == "ml" else "reml",
                                        should_stop)
    families = AUTO_FAMILIES if kernel == "auto" else (kernel,)
    settings = (False, True) if anisotropy and kernel == "auto" else (anisotropy,)
    if method == "wls":
        layouts = [ParameterLayout(f, 1, a, smoothness) for f in families for a in settings]
        steps = ProgressSteps(len(layouts), progress)
        scored = _wls_candidates(xy, values, mean_model, covariates, layouts, problem, steps)
    else:
        steps = ProgressSteps(planned_steps(len(y), len(families), settings, nested), progress)
        scored = [(_candidate(problem, fit), fit.layout) for family in families
                  for fit in fit_family(problem, family, smoothness, settings, nested, steps)]
    chosen, layout = min(scored, key=lambda pair: pair[0].aic)
    evaluation = evaluate_model(xy, values, chosen.covariance, mean_model, problem.method, covariates)
    messages = list(chosen.warnings)
    covariance = with_jitter_in_nugget(chosen.covariance, evaluation.jitter, messages)
    _, _, k = information_criteria(problem, chosen.log_likelihood, layout)
    if progress is not None:
        progress(1.0)
    return FitResult(covariance, mean_model, evaluation.coefficients, method, chosen.log_likelihood,
                     chosen.aic, chosen.bic, len(values), k, messages, candidates=[pair[0] for pair in scored])
