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
squares (:func:`.variogram_fit.fit_wls`) and evaluates the REML log-likelihood
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

from collections.abc import Callable

import numpy as np

from ..linalg.blas_threads import single_blas_thread
from ..model.mean import MeanModel
from .exact_fit import fit_exact
from .options import FitOptions, FitResult
from .search import MAX_ITERATIONS
from .vecchia_fit import fit_vecchia

VECCHIA_THRESHOLD = 2000
"""Above this many samples, likelihood fits use the Vecchia approximation (:mod:`.vecchia_fit`), whose
cost grows about linearly with n; up to it, the exact likelihood (cost n^3)."""

SINGLE_THREAD_LIMIT = 1000
"""Up to this many samples the exact fit runs its small solves on one BLAS thread (:mod:`..linalg.blas_threads`)."""


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
    max_iterations: int = MAX_ITERATIONS,
    nugget: float | None = None,
    error_variance: np.ndarray | None = None,
) -> FitResult:
    """Fit a covariance model (and the GLS mean coefficients) to samples.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations in a projected CRS (CRS units, e.g. metres).
    values : ndarray of shape (n,)
        Values in the modelling scale; not modified.
    kernel : str
        One of :data:`.options.KERNEL_CHOICES`; "auto" keeps the lowest-AIC model of
        :data:`.options.AUTO_FAMILIES`.
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
    max_iterations : int
        L-BFGS-B iteration limit of each optimiser run; a chosen model whose run stopped at it (or
        for another reason before convergence) carries a warning saying so.
    nugget : float, optional
        Hold the nugget at this value (value units squared; in the log scale for log-transformed values),
        e.g. the variance of laboratory duplicates; None fits it. Likelihood methods only.
    error_variance : ndarray of shape (n,), optional
        Each sample's own measurement-error variance (value units squared), added to the diagonal of the
        covariance beside the nugget (data, not model: it is not stored in the result). Likelihood methods only.

    Returns
    -------
    FitResult
        Ranges in CRS units, variances in value units squared.
    """
    options = FitOptions(kernel, anisotropy, mean, method, nested, smoothness, known_mean, max_iterations,
                         nugget=nugget)
    return fit_with(xy, values, options, covariates=covariates, progress=progress, should_stop=should_stop,
                    error_variance=error_variance)


def fit_with(xy: np.ndarray, values: np.ndarray, options: FitOptions, *, covariates: np.ndarray | None = None,
             progress: Callable[[float], None] | None = None, should_stop: Callable[[], bool] | None = None,
             error_variance: np.ndarray | None = None) -> FitResult:
    """:func:`fit_model` with its settings in one :class:`.options.FitOptions` object.

    ``covariates``, ``progress``, ``should_stop`` and ``error_variance`` are as for :func:`fit_model`. Data above
    :data:`VECCHIA_THRESHOLD` samples go to the Vecchia fit (except for WLS); smaller ones to the exact fit, on one
    BLAS thread up to :data:`SINGLE_THREAD_LIMIT` samples.
    """
    if options.method != "wls" and len(values) > VECCHIA_THRESHOLD:
        return fit_vecchia(xy, values, options, covariates=covariates, progress=progress, should_stop=should_stop,
                           error_variance=error_variance)
    with single_blas_thread(len(values) <= SINGLE_THREAD_LIMIT):
        return fit_exact(xy, values, options, covariates=covariates, progress=progress, should_stop=should_stop,
                         error_variance=error_variance)
