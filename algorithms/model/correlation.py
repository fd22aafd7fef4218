"""Isotropic correlation functions of the scaled distance.

Every family is written as a correlation ``rho(r)`` of the dimensionless
scaled distance ``r = h / a``, where ``h`` is a separation distance in
projected CRS units (metres for most grids) and ``a`` is the ``range``
parameter in the same units. ``rho(0) = 1`` for every family.

===========  ==========================================================
family       rho(r)
===========  ==========================================================
exponential  exp(-r)
gaussian     exp(-r**2)
spherical    1 - 1.5 r + 0.5 r**3 for r < 1, else 0
matern32     (1 + sqrt(3) r) exp(-sqrt(3) r)
matern52     (1 + sqrt(5) r + 5 r**2 / 3) exp(-sqrt(5) r)
matern       2**(1-nu) / Gamma(nu) * z**nu * K_nu(z),  z = sqrt(2 nu) r
===========  ==========================================================

The general Matérn form follows Stein (1999), *Interpolation of Spatial
Data*, eq. 2.7.14 rescaled so that ``nu = 1/2`` gives the exponential and
``nu = 3/2, 5/2`` give the closed forms above (Rasmussen & Williams 2006,
*Gaussian Processes for Machine Learning*, eq. 4.14 and 4.17).
"""
from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
from scipy import optimize, special

from ..errors import FieldcastError, FieldcastUsageError

FAMILIES = ("exponential", "gaussian", "spherical", "matern32", "matern52", "matern")
"""Names of the covariance families a structure may use."""

SMOOTHNESS_BOUNDS = (0.2, 5.0)
"""Bounds on the Matérn smoothness ``nu`` when it is fitted."""

EFFECTIVE_CORRELATION = 0.05
"""Correlation at which the effective (practical) range is read."""

_SQRT3 = math.sqrt(3.0)
_SQRT5 = math.sqrt(5.0)


def check_family(family: str, smoothness: float | None = None) -> None:
    """Raise :class:`..errors.FieldcastError` with advice when a family or smoothness is unusable."""
    if family not in FAMILIES:
        raise FieldcastError(
            f"Unknown covariance family {family!r}; choose one of {', '.join(FAMILIES)}."
        )
    if family == "matern":
        low, high = SMOOTHNESS_BOUNDS
        if smoothness is None or not (low <= smoothness <= high):
            raise FieldcastError(
                f"The general Matérn family needs a smoothness between {low} and {high}; "
                f"got {smoothness!r}. Give a smoothness in that range or choose another family."
            )


def _matern_general(r: np.ndarray, nu: float) -> np.ndarray:
    z = math.sqrt(2.0 * nu) * r
    out = np.ones_like(z)
    positive = z > 0
    zp = z[positive]
    out[positive] = (2.0 ** (1.0 - nu) / special.gamma(nu)) * zp**nu * special.kv(nu, zp)
    # K_nu underflows to 0 far out; correlation is 0 there, never NaN.
    out[~np.isfinite(out)] = 0.0
    return out


def _matern_general_derivative(r: np.ndarray, nu: float) -> np.ndarray:
    # d/dz [z^nu K_nu(z)] = -z^nu K_{nu-1}(z)  (Abramowitz & Stegun 9.6.28)
    c = math.sqrt(2.0 * nu)
    z = c * r
    out = np.zeros_like(z)
    positive = z > 0
    zp = z[positive]
    out[positive] = -(2.0 ** (1.0 - nu) / special.gamma(nu)) * c * zp**nu * special.kv(nu - 1.0, zp)
    out[~np.isfinite(out)] = 0.0
    return out


def correlation(family: str, r: np.ndarray, smoothness: float | None = None) -> np.ndarray:
    """Correlation ``rho(r)`` of a family at scaled distances ``r >= 0``.

    Parameters
    ----------
    family : str
        One of :data:`FAMILIES`.
    r : ndarray
        Scaled distances ``h / a`` (dimensionless).
    smoothness : float, optional
        Matérn ``nu``; used only by ``"matern"``.

    Returns
    -------
    ndarray
        Correlations in [0, 1], same shape as ``r``.
    """
    r = np.asarray(r, dtype=float)
    if family == "exponential":
        return np.exp(-r)
    if family == "gaussian":
        return np.exp(-(r * r))
    if family == "spherical":
        inside = r < 1.0
        return np.where(inside, 1.0 - 1.5 * r + 0.5 * r**3, 0.0)
    if family == "matern32":
        s = _SQRT3 * r
        return (1.0 + s) * np.exp(-s)
    if family == "matern52":
        s = _SQRT5 * r
        return (1.0 + s + s * s / 3.0) * np.exp(-s)
    if family == "matern":
        check_family(family, smoothness)
        return _matern_general(r, float(smoothness))
    check_family(family, smoothness)
    raise FieldcastUsageError(f"The family {family!r} is listed among the covariance families but has no formula here.")


def correlation_derivative(
    family: str, r: np.ndarray, smoothness: float | None = None
) -> np.ndarray:
    """Derivative ``d rho / d r`` of a family at scaled distances ``r >= 0``.

    Used for the analytic likelihood gradient with respect to range,
    anisotropy ratio and azimuth (chain rule through ``r``).
    """
    r = np.asarray(r, dtype=float)
    if family == "exponential":
        return -np.exp(-r)
    if family == "gaussian":
        return -2.0 * r * np.exp(-(r * r))
    if family == "spherical":
        return np.where(r < 1.0, -1.5 + 1.5 * r * r, 0.0)
    if family == "matern32":
        return -3.0 * r * np.exp(-_SQRT3 * r)
    if family == "matern52":
        s = _SQRT5 * r
        return -(5.0 / 3.0) * r * (1.0 + s) * np.exp(-s)
    if family == "matern":
        check_family(family, smoothness)
        return _matern_general_derivative(r, float(smoothness))
    check_family(family, smoothness)
    raise FieldcastUsageError(f"The family {family!r} is listed among the covariance families but has no formula here.")


@lru_cache(maxsize=256)
def effective_range_factor(family: str, smoothness: float | None = None) -> float:
    """Scaled distance ``r`` at which correlation falls to :data:`EFFECTIVE_CORRELATION` (0.05).

    Multiply by the range ``a`` to get the effective range in CRS units. With
    ``c = EFFECTIVE_CORRELATION`` the closed forms are ``-ln c`` (exponential,
    ``ln 20`` ~ 2.996) and ``sqrt(-ln c)`` (gaussian, ~ 1.731); for the
    spherical family ``r`` is the root in (0, 1) of the cubic
    ``1 - 1.5 r + 0.5 r**3 = c`` (~ 0.811, before the support ``r = 1``); the
    Matérn families are solved numerically with Brent's method.
    """
    check_family(family, smoothness)
    if family == "exponential":
        return -math.log(EFFECTIVE_CORRELATION)
    if family == "gaussian":
        return math.sqrt(-math.log(EFFECTIVE_CORRELATION))
    upper = 1.0 if family == "spherical" else 100.0

    def gap(r: float) -> float:
        return float(correlation(family, np.array([r]), smoothness)[0]) - EFFECTIVE_CORRELATION

    return float(optimize.brentq(gap, 1e-9, upper, xtol=1e-12))


def reach_factor(family: str, smoothness: float | None = None) -> float:
    """Scaled distance the fits' start values take as a structure's reach.

    The :func:`effective_range_factor`, except for the spherical family, whose
    support ``r = 1`` (where its correlation reaches 0) is used: the start
    grids of the likelihood and least-squares fits were tuned with it.
    """
    return 1.0 if family == "spherical" else effective_range_factor(family, smoothness)
