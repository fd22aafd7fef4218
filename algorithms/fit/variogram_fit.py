"""Weighted least-squares fit of a covariance model to empirical semivariograms.

The criterion is Cressie's (1985, "Fitting variogram models by weighted
least squares", *Math. Geol.* 17(5), 563-586)::

    S(theta) = sum_j N_j * (gamma_j / gamma(h_j; theta) - 1)**2

over every non-empty lag ``j`` of the given semivariograms, which is the
weighted sum of squares ``sum_j w_j (gamma_j - gamma(h_j))**2`` with the
weights ``w_j = N_j / gamma(h_j)**2`` of that paper. ``N_j`` is the pair
count, ``gamma_j`` the estimate and ``h_j`` the mean pair distance of the
lag. For an anisotropic fit the model is evaluated at the offset
``(h_j sin(azimuth), h_j cos(azimuth))`` along the lag's direction.

The model is a nugget plus one structure. The optimiser works on

==============  ========================================  ===============
parameter       meaning                                   bounds
==============  ========================================  ===============
log_sill        ln(nugget + partial sill)                 ln(gamma_max) -7 .. +5
nugget_share    nugget / (nugget + partial sill)          0 .. 1
log_range       ln(range)                                 ln(h_max) -7 .. +5
azimuth         major-axis direction, radians             none (periodic)
log_ratio       ln(minor / major range)                   ln(0.05) .. 0
log_smoothness  ln(Matérn nu)                             ln of SMOOTHNESS_BOUNDS
==============  ========================================  ===============

(azimuth and log_ratio only when anisotropic, log_smoothness only for the
general Matérn family with the smoothness left free). Given the data's
:class:`..model.parameters.DataScales` (as :func:`.exact_fit.fit_exact` gives
them), the sill and the range take the bounds of the likelihood fits instead
(:func:`..model.parameters.parameter_bounds`): the sill that of the partial
sill, the range that of the range, so a WLS fit cannot wander further than a
REML fit, and its estimates on a bound get the same warnings. The nugget share,
not the nugget, is a parameter so that a zero nugget is reachable. The
fit is bounded trust-region least squares
(:func:`scipy.optimize.least_squares`) with the analytic Jacobian, run
from several starts: first isotropic, then anisotropic from the best
isotropic fit turned to each of four directions.
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from ..errors import FieldcastError
from ..io.samples import check_samples
from ..model.correlation import (
    SMOOTHNESS_BOUNDS,
    check_family,
    correlation,
    reach_factor,
)
from ..model.covariance import CovarianceModel, Structure
from ..model.parameters import PARTIAL_SILL_BOUNDS, RATIO_LOWER, DataScales, ParameterLayout, parameter_bounds
from .search import AZIMUTH_STARTS
from .variogram import EmpiricalVariogram, directional_semivariograms, empirical_semivariogram

_LOG_SPAN = (-7.0, 5.0)
"""Bounds of log_sill and log_range relative to ln(gamma_max) and ln(h_max)."""



@dataclass(frozen=True)
class _Lags:
    """The non-empty lags of all semivariograms, flattened."""

    dx: np.ndarray
    dy: np.ndarray
    pairs: np.ndarray
    gamma: np.ndarray


def _collect_lags(variograms: Sequence[EmpiricalVariogram], anisotropy: bool) -> _Lags:
    """Offsets, pair counts and estimates of every non-empty lag."""
    dx, dy, pairs, gamma = [], [], [], []
    for variogram in variograms:
        if anisotropy and variogram.azimuth is None:
            raise FieldcastError("An anisotropic fit needs directional semivariograms (azimuth set); compute them "
                                 "with directional_semivariograms or fit with anisotropy off.")
        filled = (variogram.pairs > 0) & np.isfinite(variogram.gamma)
        theta = math.radians(variogram.azimuth or 0.0)
        h = variogram.distance[filled]
        dx.append(h * math.sin(theta))
        dy.append(h * math.cos(theta))
        pairs.append(variogram.pairs[filled].astype(float))
        gamma.append(variogram.gamma[filled])
    return _Lags(*(np.concatenate(parts) for parts in (dx, dy, pairs, gamma)))


class _Criterion:
    """Residuals ``sqrt(N_j) (gamma_j / gamma_model_j - 1)`` and their Jacobian for one model layout."""

    def __init__(self, lags: _Lags, family: str, anisotropic: bool, smoothness: float | None,
                 fit_smoothness: bool, scales: DataScales | None = None) -> None:
        self.lags = lags
        self.scales = scales
        self.family = family
        self.anisotropic = anisotropic
        self.smoothness = smoothness
        self.fit_smoothness = fit_smoothness
        self.root_pairs = np.sqrt(lags.pairs)
        self.floor = 1e-12 * float(np.max(lags.gamma))

    def model(self, theta: np.ndarray) -> CovarianceModel:
        """The covariance model of a parameter vector."""
        sill, share, a = math.exp(theta[0]), float(np.clip(theta[1], 0.0, 1.0)), math.exp(theta[2])
        azimuth, ratio = 0.0, 1.0
        if self.anisotropic:
            azimuth, ratio = math.degrees(theta[3]), min(math.exp(theta[4]), 1.0)
        nu = self.smoothness
        if self.fit_smoothness:
            nu = float(np.clip(math.exp(theta[-1]), *SMOOTHNESS_BOUNDS))
        structure = Structure(self.family, sill * (1.0 - share), a, azimuth, ratio, nu)
        return CovarianceModel((structure,), sill * share)

    def _gamma(self, theta: np.ndarray) -> np.ndarray:
        gamma = self.model(theta).semivariogram(self.lags.dx, self.lags.dy)
        return np.maximum(gamma, self.floor)

    def residuals(self, theta: np.ndarray) -> np.ndarray:
        """Weighted relative misfit of every lag."""
        return self.root_pairs * (self.lags.gamma / self._gamma(theta) - 1.0)

    def jacobian(self, theta: np.ndarray) -> np.ndarray:
        """Derivatives of :meth:`residuals`; analytic except for the smoothness (difference quotient)."""
        model = self.model(theta)
        structure = model.structures[0]
        gamma = self._gamma(theta)
        dx, dy = self.lags.dx, self.lags.dy
        grads = structure.gradients_from_offsets(dx, dy)
        rho = correlation(self.family, structure.scaled_distance(dx, dy), structure.smoothness)
        # gamma = sill - sill (1 - share) rho, so d gamma / d share = sill rho;
        # the covariance derivatives enter with a minus sign.
        columns = [gamma, model.sill * rho, -grads["log_range"]]
        if self.anisotropic:
            columns += [-grads["azimuth"], -grads["log_ratio"]]
        if self.fit_smoothness:
            low, high = self.bounds()
            up, down = theta.copy(), theta.copy()
            up[-1] = min(theta[-1] + 1e-5, high[-1])
            down[-1] = max(theta[-1] - 1e-5, low[-1])
            columns.append((self._gamma(up) - self._gamma(down)) / (up[-1] - down[-1]))
        d_gamma = np.column_stack(columns)
        d_gamma[gamma <= self.floor] = 0.0
        return (-self.root_pairs * self.lags.gamma / gamma**2)[:, None] * d_gamma

    def bounds(self) -> tuple[np.ndarray, np.ndarray]:
        """Lower and upper bounds of the parameter vector."""
        if self.scales is None:
            log_gamma = math.log(float(np.max(self.lags.gamma)))
            log_h = math.log(float(np.max(np.hypot(self.lags.dx, self.lags.dy))))
            log_sill = (log_gamma + _LOG_SPAN[0], log_gamma + _LOG_SPAN[1])
            log_range = (log_h + _LOG_SPAN[0], log_h + _LOG_SPAN[1])
        else:
            log_variance = math.log(self.scales.variance)
            log_sill = tuple(log_variance + math.log(b) for b in PARTIAL_SILL_BOUNDS)
            layout = ParameterLayout(self.family, 1, False, self.smoothness)
            log_range = parameter_bounds(layout, self.scales)[layout.index("log_range_1")]
        low = [log_sill[0], 0.0, log_range[0]]
        high = [log_sill[1], 1.0, log_range[1]]
        if self.anisotropic:
            low += [-np.inf, math.log(RATIO_LOWER)]
            high += [np.inf, 0.0]
        if self.fit_smoothness:
            low.append(math.log(SMOOTHNESS_BOUNDS[0]))
            high.append(math.log(SMOOTHNESS_BOUNDS[1]))
        return np.array(low), np.array(high)

    def solve(self, start: np.ndarray) -> tuple[float, np.ndarray]:
        """Least-squares fit from one start; returns (criterion value, parameters)."""
        low, high = self.bounds()
        start = np.clip(start, low, high)
        result = least_squares(self.residuals, start, jac=self.jacobian, bounds=(low, high), method="trf",
                               x_scale="jac")
        return float(2.0 * result.cost), result.x


def _isotropic_starts(
    lags: _Lags, family: str, smoothness: float | None, fit_smoothness: bool
) -> list[np.ndarray]:
    """Starting vectors: nugget share 0.1 or 0.5, reach (effective range; spherical: its support) 1/4,
    1/2 or 1 of the largest lag distance, and a free Matérn smoothness of 0.5 or 2."""
    log_sill = math.log(float(np.max(lags.gamma)))
    h_max = float(np.max(np.hypot(lags.dx, lags.dy)))
    starts = []
    for nu in (0.5, 2.0) if fit_smoothness else (smoothness,):
        factor = reach_factor(family, nu)
        for share in (0.1, 0.5):
            for fraction in (0.25, 0.5, 1.0):
                theta = [log_sill, share, math.log(fraction * h_max / factor)]
                starts.append(np.array(theta + ([math.log(nu)] if fit_smoothness else [])))
    return starts


def fit_semivariogram_model(
    variograms: Sequence[EmpiricalVariogram], family: str, *, anisotropy: bool = True,
    smoothness: float | None = None, scales: DataScales | None = None,
) -> CovarianceModel:
    """Nugget plus one structure fitted to empirical semivariograms by Cressie's weighted least squares.

    Parameters
    ----------
    variograms : sequence of EmpiricalVariogram
        Directional semivariograms when ``anisotropy`` (their lags are used
        along their azimuths), else usually the single omnidirectional one.
    family : str
        Correlation family, one of :data:`.correlation.FAMILIES`.
    anisotropy : bool
        Fit the major-axis azimuth and the minor/major range ratio.
    smoothness : float, optional
        Matérn ``nu`` for ``family == "matern"``; fitted when None. Other
        families ignore it.
    scales : DataScales, optional
        Spacing, diameter and variance of the data: the sill and range then take the bounds of the
        likelihood fits (module docstring); without them, bounds around the largest lag and estimate.

    Returns
    -------
    CovarianceModel
        The fit with the smallest criterion over all starts.
    """
    fit_smoothness = family == "matern" and smoothness is None
    if family != "matern":
        smoothness = None
    check_family(family, 1.0 if fit_smoothness else smoothness)
    lags = _collect_lags(variograms, anisotropy)
    n_parameters = 3 + 2 * anisotropy + fit_smoothness
    if len(lags.gamma) < n_parameters + 1:
        raise FieldcastError(
            f"Only {len(lags.gamma)} distance lags contain sample pairs, too few to fit {n_parameters} "
            "parameters by least squares. Turn ANISOTROPY off, fit with METHOD 'reml' (a likelihood fit needs "
            "no lags), or add samples."
        )
    if not np.max(lags.gamma) > 0:
        raise FieldcastError("Every lag has zero semivariance: the values do not vary, so there is nothing to fit.")

    isotropic = _Criterion(lags, family, False, smoothness, fit_smoothness, scales)
    cost, theta = min((isotropic.solve(start) for start in _isotropic_starts(lags, family, smoothness,
                                                                               fit_smoothness)),
                      key=lambda fit: fit[0])
    if not anisotropy:
        return isotropic.model(theta)

    anisotropic = _Criterion(lags, family, True, smoothness, fit_smoothness, scales)
    # The isotropic optimum is itself an anisotropic model with ratio 1 (azimuth 0).
    best = (cost, np.concatenate([theta[:3], [0.0, 0.0], theta[3:]]))
    for azimuth in AZIMUTH_STARTS:
        start = np.concatenate([theta[:3], [math.radians(azimuth), math.log(0.5)], theta[3:]])
        best = min(best, anisotropic.solve(start), key=lambda fit: fit[0])
    return anisotropic.model(best[1])


def fit_wls(
    xy: np.ndarray, residuals: np.ndarray, family: str, *, anisotropy: bool = True,
    smoothness: float | None = None, n_lags: int = 15, cutoff: float | None = None,
    scales: DataScales | None = None,
) -> CovarianceModel:
    """Fit a nugget plus one structure to the empirical semivariogram by weighted least squares.

    Minimises Cressie's (1985, *Math. Geol.* 17(5), 563-586) criterion
    ``sum_j N_j (gamma_j / gamma_model(h_j) - 1)**2`` over the lags ``j``,
    see :func:`fit_semivariogram_model`. With
    ``anisotropy`` the lags are those of the directional semivariograms at
    0, 45, 90 and 135 degrees (tolerance 22.5) and the model is evaluated
    along each lag's direction, so azimuth and ratio are fitted too;
    otherwise the omnidirectional semivariogram is used and the model is
    isotropic.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations in CRS units.
    residuals : ndarray of shape (n,)
        Values minus their fitted trend, in the modelling scale.
    family : str
        Correlation family, one of :data:`.correlation.FAMILIES`.
    anisotropy : bool
        Fit geometric anisotropy (azimuth and minor/major range ratio).
    smoothness : float, optional
        Matérn ``nu`` for the ``"matern"`` family; fitted when None. Other
        families ignore it.
    n_lags, cutoff
        As in :func:`.variogram.empirical_semivariogram`.
    scales : DataScales, optional
        As in :func:`fit_semivariogram_model`.

    Returns
    -------
    CovarianceModel
    """
    check_samples(xy, residuals)
    if anisotropy:
        variograms = directional_semivariograms(xy, residuals, n_lags=n_lags, cutoff=cutoff)
    else:
        variograms = [empirical_semivariogram(xy, residuals, n_lags=n_lags, cutoff=cutoff)]
    return fit_semivariogram_model(variograms, family, anisotropy=anisotropy, smoothness=smoothness, scales=scales)
