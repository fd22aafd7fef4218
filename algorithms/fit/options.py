"""The settings and results of a single-field fit, shared by the exact fit and the Vecchia fit.

:class:`FitOptions` carries the settings of :func:`.fitting.fit_model`;
:class:`FitResult` and :class:`CandidateFit` hold what a fit found. The
helpers check the settings, build the mean model and compute AIC and BIC as
the module docstring of :mod:`.fitting` defines them.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import FieldcastError
from ..io.samples import check_error_variance
from ..model.correlation import SMOOTHNESS_BOUNDS
from ..model.covariance import CovarianceModel, check_variance
from ..model.mean import MEAN_KINDS, MeanModel
from ..model.parameters import ParameterLayout
from .likelihood import jitter_message
from .search import MAX_ITERATIONS, SearchProblem
from .vecchia import DEFAULT_NEIGHBOURS

FIT_METHODS = ("reml", "ml", "wls")
"""Fitting methods: restricted likelihood, full likelihood, weighted least squares on the variogram."""

KERNEL_CHOICES = ("auto", "exponential", "spherical", "gaussian", "matern32", "matern52", "matern")
"""Covariance families a fit may use; "auto" compares the five closed-form families by AIC."""

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
        See the module docstring of :mod:`.fitting`.
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
        "exact", or "vecchia (m neighbours)" above :data:`.fitting.VECCHIA_THRESHOLD` samples.
    candidates : list of CandidateFit
        Every model compared, the chosen one included.
    fixed_nugget : float or None
        The nugget the fit held (:attr:`FitOptions.nugget`), None when it was fitted.
    error_variance_field : str or None
        Name of the per-sample measurement-error variances the fit used (:attr:`FitOptions.error_variance_field`),
        None without them.
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
    fixed_nugget: float | None = None
    error_variance_field: str | None = None

    def summary(self) -> dict:
        """JSON-ready facts of the fit, for ``ModelDocument.fit`` (``fixed_nugget`` and ``error_variance_field``
        only when set)."""
        measurement = {key: value for key, value in (("fixed_nugget", self.fixed_nugget),
                                                     ("error_variance_field", self.error_variance_field))
                       if value is not None}
        return {**measurement,
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
        raise FieldcastError("Nested structures are fitted by likelihood only; choose METHOD reml or ml, or "
                             "fit a single structure, as 'Fit covariance model' does.")


@dataclass(frozen=True)
class FitOptions:
    """The settings of one fit, as :func:`.fitting.fit_model` takes them (see its parameters).

    Settings only: the covariates (data) and the progress and cancel callables are arguments of the fits themselves
    (:func:`.fitting.fit_with`, :func:`.vecchia_fit.fit_vecchia`, :func:`.shared.fit_shared`).
    """

    kernel: str = "auto"
    anisotropy: bool = True
    mean: str | MeanModel = "constant"
    method: str = "reml"
    nested: bool = False
    smoothness: float | None = None
    known_mean: float = 0.0
    max_iterations: int = MAX_ITERATIONS
    units: str = "coordinate units"
    """The coordinates' unit in the words of the fit's warnings (the working CRS's, e.g. ``"metre"``); the
    default for callers that do not know it."""
    nugget: float | None = None
    """The nugget held fixed (modelling units squared: log units squared for a log model), e.g. the variance of
    laboratory duplicates; None fits it. Likelihood fits only."""
    error_variance_field: str = "error variances"
    """The name the per-sample measurement-error variances (the fits' ``error_variance`` argument) go by in the
    model file and the log (the plugin gives the field's)."""

    likelihood_neighbours: int = DEFAULT_NEIGHBOURS
    """Conditioning-set size of the Vecchia likelihood (fits above :data:`.fitting.VECCHIA_THRESHOLD` samples)."""


    def __post_init__(self) -> None:
        count = self.likelihood_neighbours
        if isinstance(count, bool) or not isinstance(count, (int, np.integer)) or count < 1:
            raise FieldcastError(f"The likelihood neighbours (LIKELIHOOD_NEIGHBOURS) must be a whole number of 1 or "
                                 f"more; got {count!r}. Give a positive whole number (default {DEFAULT_NEIGHBOURS}; "
                                 "more is closer to the exact likelihood and slower).")
        if self.nugget is not None:
            check_variance("fixed nugget (NUGGET)", self.nugget)
            if self.method == "wls":
                raise FieldcastError("A fixed NUGGET is held by the likelihood fits only; choose METHOD reml or ml, "
                                     "or leave NUGGET empty.")
        limit = self.max_iterations
        if isinstance(limit, bool) or not isinstance(limit, (int, np.integer)) or limit < 1:
            raise FieldcastError(f"The optimiser's iteration limit must be a whole number of 1 or more; got "
                                 f"{limit!r}. Give a positive whole number (default {MAX_ITERATIONS}).")

    def describe(self) -> str:
        """The main settings in words, for the log: ``kernel auto, anisotropy on, constant trend, REML``."""
        mean = self.mean if isinstance(self.mean, str) else self.mean.kind
        nugget = "" if self.nugget is None else f", nugget fixed at {self.nugget:g}"
        return (f"kernel {self.kernel}, anisotropy {'on' if self.anisotropy else 'off'}, {mean} trend, "
                f"{self.method.upper()}{nugget}")


def checked_error_variance(error_variance: np.ndarray | None, n: int, method: str) -> np.ndarray | None:
    """Per-sample error variances for a likelihood fit, checked (:func:`..io.samples.check_error_variance`).

    Raises
    ------
    FieldcastError
        For unusable variances, or with METHOD wls (its variogram fit has no place for them).
    """
    if error_variance is None:
        return None
    if method == "wls":
        raise FieldcastError("Per-sample error variances are used by the likelihood fits only; choose METHOD reml "
                             "or ml, or leave ERROR_VARIANCE_FIELD empty.")
    return check_error_variance(error_variance, n)


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
