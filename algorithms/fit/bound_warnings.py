"""Plain-words warnings for fitted parameters that ended on a bound of the search.

An estimate on a bound is not a maximum of the likelihood in the usual
sense: the data would have liked to go further. Each message says what the
bound means for the data and what to try. The bounds themselves are
described in :mod:`..model.parameters`.
"""
from __future__ import annotations

import math

import numpy as np

from ..model.parameters import (
    NUGGET_BOUNDS,
    PARTIAL_SILL_BOUNDS,
    RANGE_LOWER_FRACTION,
    RANGE_UPPER_FACTOR,
    ParameterLayout,
)

BOUND_TOLERANCE = 1e-3
"""Distance in log space (about 0.1 %) within which an estimate counts as on its bound."""


def _structure_label(layout: ParameterLayout, name: str) -> str:
    """`` of the short-range structure`` etc. for nested models, empty otherwise."""
    if layout.n_structures == 1:
        return ""
    return " of the short-range structure" if name.endswith("_1") else " of the long-range structure"


def _message(layout: ParameterLayout, name: str, upper: bool, value: float, azimuth: float, units: str) -> str:
    """The warning for parameter ``name`` on its lower or upper bound (``value`` in data units, a range in
    ``units``)."""
    which = _structure_label(layout, name)
    single = " Or fit a single structure, as 'Fit covariance model' does." if layout.n_structures > 1 else ""
    if name.startswith("log_range"):
        if upper:
            return (
                f"The range{which} hit its upper bound ({value:.4g} {units}, {RANGE_UPPER_FACTOR:g} times "
                "the largest distance between samples): the data show no clear sill within the study area, and the "
                "fit is close to a linear variogram, so range and sill are poorly determined. Try a trend (TREND "
                "'linear' or 'quadratic') that takes up the large-scale change."
            )
        return (
            f"The range{which} hit its lower bound ({value:.4g} {units}, {RANGE_LOWER_FRACTION:g} of the "
            "smallest distance between samples): the correlation is shorter than the sample spacing, so it acts "
            f"as extra nugget. Denser sampling would be needed to resolve it.{single}"
        )
    if name.startswith("log_partial_sill"):
        if upper:
            return (
                f"The partial sill{which} hit its upper bound ({value:.4g}, {PARTIAL_SILL_BOUNDS[1]:g} times the "
                "sample variance): the variance keeps growing with distance (no sill). Try a trend (TREND "
                "'linear' or 'quadratic')."
            )
        return (
            f"The partial sill{which} hit its lower bound ({value:.4g}): the structure adds almost no variance, "
            "so the data show little spatial correlation at its scale, and kriging gives little more than the "
            f"mean at that scale.{single}"
        )
    if name == "log_nugget":
        if upper:
            return (
                f"The nugget hit its upper bound ({value:.4g}, {NUGGET_BOUNDS[1]:g} times the sample variance): the "
                "model finds no spatial correlation. Check the values for outliers or a wrong FIELD, or try "
                "another KERNEL."
            )
        return (
            f"The nugget hit its lower bound ({value:.4g}, essentially zero): the model treats the measurements "
            "as exact, so the surface passes through every sample. This is expected for smooth, precise data; "
            "if the measurements carry error, check for outliers and duplicate samples."
        )
    if name == "log_ratio":
        if upper:
            return (
                "The anisotropy ratio reached 1: the data show no direction of longer correlation, so the azimuth "
                "is not determined. The isotropic model (anisotropy off) fits as well with two fewer parameters."
            )
        return (
            f"The anisotropy ratio hit its lower bound ({value:.3g}) with the major axis at azimuth {azimuth:.0f} "
            "degrees: values change far faster across that direction than along it, which usually means a "
            "trend. Try TREND 'linear', or ANISOTROPY off."
        )
    if upper:
        return (
            f"The Matérn smoothness hit its upper bound ({value:.3g}): the field is very smooth, and the gaussian "
            "family is the limit of this case. Try KERNEL 'gaussian' (or 'matern52')."
        )
    return (
        f"The Matérn smoothness hit its lower bound ({value:.3g}): the field is rougher than the exponential "
        "family (smoothness 0.5). Check the values for outliers, or try KERNEL 'exponential'."
    )


def bound_warnings(layout: ParameterLayout, theta: np.ndarray, bounds: list, units: str = "coordinate units"
                   ) -> list[str]:
    """Warnings for every entry of ``theta`` within :data:`BOUND_TOLERANCE` of its bound or beyond it.

    Parameters
    ----------
    layout : ParameterLayout
    theta : ndarray
        Parameter vector in the units of the data (log space, as packed by ``layout``).
    bounds : list of (low, high)
        From :func:`.parameters.parameter_bounds` for the same data units.
    units : str
        The coordinates' unit, for ranges in the messages (e.g. ``"metre"``).
    """
    azimuth = math.degrees(theta[layout.index("azimuth")]) % 180.0 if layout.anisotropy else 0.0
    messages = []
    for name, value, (low, high) in zip(layout.names, theta, bounds):
        for limit, upper in ((low, False), (high, True)):
            if limit is None:
                continue
            beyond = value - limit if upper else limit - value  # >= 0 past the bound (fits not bounded by it)
            if beyond >= -BOUND_TOLERANCE:
                messages.append(_message(layout, name, upper, math.exp(value), azimuth, units))
    return messages
