"""What a transform learns from the samples: the Box-Cox lambda by profile likelihood, the normal-score knots.

Box-Cox lambda (Box & Cox 1964, *J. R. Stat. Soc. B* 26, 211-252, section 3): the log-likelihood of the
attribute ``z`` is that of the transformed values ``y = ((z + c)^lambda - 1) / lambda`` plus the log Jacobian
``(lambda - 1) sum log(z + c)``. The profile ``l(lambda)`` refits the covariance model at each lambda (REML,
or ML when chosen; REML with the Jacobian added is common practice) and adds the Jacobian; the estimate
maximises it by a bounded scalar search (Brent's method, scipy ``minimize_scalar``) over
:data:`LAMBDA_BOUNDS` to :data:`LAMBDA_TOLERANCE`. To keep it cheap each profile fit uses the exponential
family when the family is ``auto``, and REML when the method is ``wls``; the final fit then uses the settings
chosen, at the estimated lambda.

Normal score: knots from the empirical distribution weighted by the cell-declustering weights
(:mod:`.declustering`).
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np
from scipy import optimize

from ..errors import Cancelled
from ..model.transform import Transform
from .declustering import Declustering, decluster
from .fitting import fit_with
from .options import FitOptions

LAMBDA_BOUNDS = (-1.0, 2.0)
"""Interval the Box-Cox lambda is searched in."""
LAMBDA_TOLERANCE = 0.01
"""Absolute tolerance of the lambda estimate."""


@dataclass(frozen=True)
class TransformFit:
    """A transform completed from the samples.

    Attributes
    ----------
    transform : Transform
        With its lambda or knots.
    profile : list of (float, float)
        ``(lambda, profile log-likelihood)`` of each Box-Cox profile fit, in the order evaluated (empty unless
        lambda was estimated).
    """

    transform: Transform
    profile: list[tuple[float, float]] = field(default_factory=list)

    def log_lines(self) -> list[str]:
        """How the transform was completed, in words for the log."""
        transform = self.transform
        if self.profile:
            best = max(self.profile, key=lambda point: point[1])
            return [f"Box-Cox lambda {transform.boxcox_lambda:.3g} estimated by profile likelihood (fit log-likelihood "
                    f"plus the Jacobian (lambda - 1) sum log(value + offset), maximum {best[1]:.6g}; bounded search "
                    f"over [{LAMBDA_BOUNDS[0]:g}, {LAMBDA_BOUNDS[1]:g}], {len(self.profile)} fits)."]
        if transform.kind == "normalscore":
            return [f"Normal-score transform: {len(transform.knots) - 2} distinct values as knots, weighted by the "
                    "cell-declustering weights; back-transforms by the inverse (median, quantiles) and Gauss-Hermite "
                    "quadrature (mean, variance)."]
        return []


def boxcox_profile(lam: float, xy: np.ndarray, values: np.ndarray, offset: float, options: FitOptions,
                   covariates: np.ndarray | None = None) -> float:
    """The Box-Cox profile log-likelihood at ``lam``: the fit's log-likelihood of the transformed ``values``
    (attribute units) plus ``(lam - 1) sum log(values + offset)``."""
    transform = Transform("boxcox", offset, float(lam))
    result = fit_with(xy, transform.forward(values), options, covariates=covariates)
    return float(result.log_likelihood + (lam - 1.0) * np.sum(np.log(np.asarray(values) + offset)))


def estimate_lambda(xy: np.ndarray, values: np.ndarray, offset: float, options: FitOptions,
                    covariates: np.ndarray | None = None, progress: Callable[[float], None] | None = None,
                    should_stop: Callable[[], bool] | None = None) -> TransformFit:
    """The Box-Cox lambda maximising :func:`boxcox_profile` over :data:`LAMBDA_BOUNDS` (module notes).

    Raises
    ------
    FieldcastError
        For values with ``value + offset <= 0`` (naming LOG_OFFSET).
    Cancelled
        When ``should_stop()`` turns true between profile fits.
    """
    Transform("boxcox", offset, 1.0).forward(values)  # refuses values below the offset before any fit
    profile_options = replace(options, kernel="exponential" if options.kernel == "auto" else options.kernel,
                              method="reml" if options.method == "wls" else options.method)
    profile: list[tuple[float, float]] = []

    def negative(lam: float) -> float:
        if should_stop is not None and should_stop():
            raise Cancelled("The Box-Cox lambda search was cancelled.")
        value = boxcox_profile(lam, xy, values, offset, profile_options, covariates)
        profile.append((float(lam), value))
        if progress is not None:
            progress(min(1.0, len(profile) / 20.0))
        return -value

    found = optimize.minimize_scalar(negative, bounds=LAMBDA_BOUNDS, method="bounded",
                                     options={"xatol": LAMBDA_TOLERANCE})
    return TransformFit(Transform("boxcox", offset, float(found.x)), profile)


def fitted_transform(transform: Transform, xy: np.ndarray, values: np.ndarray, options: FitOptions, *,
                     covariates: np.ndarray | None = None, declustering: Declustering | None = None,
                     progress: Callable[[float], None] | None = None,
                     should_stop: Callable[[], bool] | None = None) -> TransformFit:
    """``transform`` completed from samples at ``xy`` (n, 2) with attribute ``values`` (n,): a Box-Cox lambda
    estimated when none is given, normal-score knots weighted by ``declustering`` (computed when None);
    any other transform unchanged. ``covariates`` are the mean's covariate columns at the samples."""
    if transform.complete:
        return TransformFit(transform)
    if transform.kind == "boxcox":
        return estimate_lambda(xy, values, transform.offset, options, covariates, progress, should_stop)
    weights = (declustering or decluster(xy, values)).weights
    return TransformFit(Transform.normal_score(values, weights))
