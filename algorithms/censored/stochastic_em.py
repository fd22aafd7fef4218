"""Fitting a covariance model to samples with censored values: stochastic EM with Gibbs imputation.

Stochastic EM (Celeux & Diebolt 1985) alternates an S-step, which replaces the censored values by a draw from
their conditional law under the current model (here a few sweeps of :class:`.gibbs.TruncatedGibbs`, which keeps
every draw below its limit), and an M-step, which fits the model to the completed data (the ordinary REML, ML or
WLS fit, :func:`..fit.fitting.fit_with`). The parameters form a Markov chain around the maximum-likelihood
estimate of the censored data; the estimate is the average of the last half of the iterations (nuggets and
partial sills averaged, ranges averaged in the log, azimuths averaged as doubled angles, ratios and
smoothness averaged). The family (and whether it is anisotropic) is chosen once, by the first fit, on the data
with every censored value at its limit less half the standard deviation of the detected values.

The mean coefficients are the generalised least-squares estimate on the mean of the final imputations, and the
log-likelihood, AIC and BIC are those of the last completed data set (the censored likelihood itself is not
computed for a fit: :mod:`.likelihood` gives it for small cases).
"""
from __future__ import annotations

import cmath
import math
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from ..errors import Cancelled, FieldcastError
from ..fit.fitting import fit_with
from ..fit.options import FitOptions, FitResult
from ..model.covariance import CovarianceModel, Structure
from ..predict.kriging import KrigingPredictor
from .gibbs import TruncatedGibbs

LARGEST_CENSORED_FIT = 4000
"""Most samples the likelihood treatment takes (its Gibbs sampler holds the n x n precision matrix)."""


@dataclass(frozen=True)
class CensoredFit:
    """A fit to censored samples.

    Attributes
    ----------
    result : FitResult
        The averaged model (see the module docstring).
    imputations : ndarray of shape (m, n)
        Completed data sets drawn under that model: the observed values, and draws below the limits.
    censored : ndarray of bool, shape (n,)
        Which samples were censored.
    iterations : int
        Stochastic EM iterations run.
    seed : int
        Seed of the random draws (the same seed gives the same fit).
    """

    result: FitResult
    imputations: np.ndarray
    censored: np.ndarray
    iterations: int
    seed: int

    def summary(self) -> dict:
        """JSON-ready facts for the model file's ``fit["censored"]``."""
        return censoring_summary(int(self.censored.sum()), len(self.censored), "likelihood",
                                 iterations=self.iterations, imputations=len(self.imputations), seed=self.seed)


def censoring_summary(count: int, n: int, treatment: str, **details) -> dict:
    """What the model file, the log and the report say about censored samples: their count, the samples' count,
    the treatment ("likelihood" or "substitution") and its details (e.g. ``factor``, ``iterations``)."""
    return {"count": int(count), "samples": int(n), "treatment": treatment, **details}


def average_covariance(models: list[CovarianceModel]) -> CovarianceModel:
    """The average of models with the same structure families (see the module docstring for how)."""
    first = models[0]
    structures = []
    for k, structure in enumerate(first.structures):
        group = [model.structures[k] for model in models]
        turn = sum(cmath.exp(2j * math.radians(s.azimuth)) for s in group)
        smooth = [s.smoothness for s in group if s.smoothness is not None]
        structures.append(Structure(
            structure.family, float(np.mean([s.partial_sill for s in group])),
            float(np.exp(np.mean([np.log(s.range) for s in group]))),
            math.degrees(cmath.phase(turn)) / 2.0 if abs(turn) > 0 else structure.azimuth,
            float(min(1.0, np.mean([s.ratio for s in group]))),
            float(np.mean(smooth)) if smooth else None))
    return CovarianceModel(tuple(structures), float(np.mean([model.nugget for model in models])))


def gibbs_for(xy: np.ndarray, values: np.ndarray, censored: np.ndarray, covariance: CovarianceModel,
              mean_vector: np.ndarray) -> TruncatedGibbs:
    """The Gibbs sampler of the censored values under a covariance model and a mean at the samples."""
    return TruncatedGibbs(values, censored, mean_vector, covariance.data_covariance(xy))


def fit_censored(xy: np.ndarray, values: np.ndarray, censored: np.ndarray, options: FitOptions, *,
                 covariates: np.ndarray | None = None, iterations: int = 10, imputations: int = 20, seed: int = 1,
                 progress: Callable[[float], None] | None = None,
                 should_stop: Callable[[], bool] | None = None) -> CensoredFit:
    """Fit a model to samples of which ``censored`` ones are limits (true value below), by stochastic EM.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations (CRS units).
    values : ndarray of shape (n,)
        Values in the modelling scale; at censored samples, the limit in that scale.
    censored : ndarray of bool, shape (n,)
        True where the value is a limit.
    options : FitOptions
        The fit's settings, as for :func:`..fit.fitting.fit_with`.
    covariates : ndarray of shape (n, k), optional
        Covariate columns of the mean.
    iterations : int
        Stochastic EM iterations after the first fit (the last half are averaged).
    imputations : int
        Completed data sets drawn under the final model, for prediction.
    seed : int
        Seed of the random draws.
    progress, should_stop : callable, optional
        Progress fraction in [0, 1]; cancel request (raises ``Cancelled``).

    Returns
    -------
    CensoredFit
    """
    values = np.asarray(values, dtype=float)
    censored = np.asarray(censored, dtype=bool)
    if len(values) > LARGEST_CENSORED_FIT:
        raise FieldcastError(
            f"The likelihood treatment of values below a limit takes at most {LARGEST_CENSORED_FIT} samples; there "
            f"are {len(values)}. Set NONDETECTS=substitution, or thin the samples.")
    detected = values[~censored]
    if len(detected) < 3:
        raise FieldcastError(
            f"Only {len(detected)} of {len(values)} samples are above their limit; at least 3 detected values are "
            "needed to fit a model. Choose samples with more detected values.")
    report = progress or (lambda fraction: None)
    stop = should_stop or (lambda: False)
    rng = np.random.default_rng(seed)
    start = values.copy()
    start[censored] = values[censored] - 0.5 * np.std(detected)
    result = fit_with(xy, start, options, covariates=covariates,
                      progress=lambda f: report(0.3 * f), should_stop=should_stop)
    fixed = fixed_choice(options, result)
    current = start[censored]
    kept: list[CovarianceModel] = []
    for step in range(iterations):
        if stop():
            raise Cancelled("The fit was cancelled.")
        sampler = gibbs_for(xy, values, censored, result.covariance, trend_at(result, xy, covariates))
        current = sampler.draws(1, rng, burn_in=5, thin=1, current=current)[0]
        result = fit_with(xy, sampler.completed(current), fixed, covariates=covariates, should_stop=should_stop)
        if step >= iterations // 2:
            kept.append(result.covariance)
        report(0.3 + 0.6 * (step + 1) / iterations)
    covariance = average_covariance(kept or [result.covariance])
    trend = KrigingPredictor(xy, sampler.completed(current), covariance, result.mean, covariates)
    sampler = gibbs_for(xy, values, censored, covariance, result.mean.design(xy, covariates) @ trend.coefficients
                        + result.mean.known_mean(len(values)))
    completed = sampler.completed(sampler.draws(imputations, rng, burn_in=20, thin=5, current=current))
    coefficients = KrigingPredictor(xy, completed.mean(axis=0), covariance, result.mean, covariates).coefficients
    note = (f"{int(censored.sum())} of {len(values)} values are below their limit: the model is the average of "
            f"{len(kept) or 1} stochastic EM iterations; its log-likelihood and AIC are those of the last completed "
            "data set.")
    final = replace(result, covariance=covariance, coefficients=coefficients, warnings=[*result.warnings, note])
    report(1.0)
    return CensoredFit(final, completed, censored, iterations, seed)


def fixed_choice(options: FitOptions, result: FitResult) -> FitOptions:
    """The settings with the family, anisotropy and mean the first fit chose, for the later fits."""
    chosen = min(result.candidates, key=lambda c: c.aic) if result.candidates else None
    anisotropy = chosen.anisotropy if chosen is not None else options.anisotropy
    return replace(options, kernel=result.covariance.structures[0].family, anisotropy=anisotropy, mean=result.mean)


def trend_at(result: FitResult, xy: np.ndarray, covariates: np.ndarray | None) -> np.ndarray:
    """The fitted mean at the samples (trend, covariates and any known mean), modelling scale."""
    return result.mean.design(xy, covariates) @ result.coefficients + result.mean.known_mean(len(xy))
