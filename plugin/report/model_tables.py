"""Plain-words descriptions of a covariance model: names, units, parameter rows and model curves.

Works on a ``CovarianceModel`` and a ``Transform`` from the engine through
their attributes only, so this package needs no import of the engine.
"""
from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    from ...algorithms import CovarianceModel, Transform

FAMILY_NAMES = {
    "exponential": "exponential",
    "gaussian": "Gaussian",
    "spherical": "spherical",
    "matern32": "Matérn, smoothness 3/2",
    "matern52": "Matérn, smoothness 5/2",
    "matern": "Matérn, smoothness fitted",
}
"""Words the reports use for each covariance family."""

MODEL_CURVE_POINTS = 120
"""Number of distances at which a model semivariogram curve is drawn."""


def family_name(family: str) -> str:
    """Display name of a covariance family (the family code itself when unknown)."""
    return FAMILY_NAMES.get(family, family)


def scale_words(transform: Transform, field: str) -> str:
    """What scale the modelled numbers are on, e.g. ``"zinc"`` or ``"natural log of (zinc + 0)"``."""
    name = field or "the attribute"
    if transform.kind == "none":
        return name
    if not transform.is_log:
        return transform.units_note.replace("the attribute", name).replace("attribute", name)
    return f"natural log of {name}" if transform.offset == 0 else f"natural log of ({name} + {transform.offset:g})"


def variance_units(transform: Transform, field: str) -> str:
    """Units of variances in the modelling scale."""
    if transform.kind == "none":
        return f"({field or 'attribute'} units)\u00b2"
    if not transform.is_log:
        return f"({transform.kind} units)\u00b2"
    return "(log units)\u00b2"


def parameter_rows(covariance: CovarianceModel, distance_units: str, variance_unit: str) -> list[dict[str, Any]]:
    """Rows ``{"name", "value", "units"}`` for the nugget and every structure's parameters.

    The effective range is the distance at which correlation falls to 0.05
    (for the spherical family about 0.81 times its range); along the minor
    axis it is the effective range times the ratio.
    """
    rows: list[dict[str, Any]] = [{"name": "nugget", "value": covariance.nugget, "units": variance_unit}]
    several = len(covariance.structures) > 1
    for index, structure in enumerate(covariance.structures, start=1):
        prefix = f"structure {index}: " if several else ""
        rows.append({"name": f"{prefix}family", "value": family_name(structure.family), "units": ""})
        if structure.smoothness is not None:
            rows.append({"name": f"{prefix}smoothness \u03bd", "value": structure.smoothness, "units": ""})
        rows += [
            {"name": f"{prefix}partial sill", "value": structure.partial_sill, "units": variance_unit},
            {"name": f"{prefix}range parameter (major axis)", "value": structure.range, "units": distance_units},
            {"name": f"{prefix}effective range, major axis", "value": structure.effective_range,
             "units": distance_units},
            {"name": f"{prefix}effective range, minor axis", "value": structure.effective_range * structure.ratio,
             "units": distance_units},
            {"name": f"{prefix}major-axis azimuth", "value": structure.azimuth, "units": "degrees from north"},
            {"name": f"{prefix}minor/major range ratio", "value": structure.ratio, "units": ""},
        ]
    rows.append({"name": "sill (nugget + partial sills)", "value": covariance.sill, "units": variance_unit})
    return rows


def model_curve(covariance: CovarianceModel, cutoff: float, azimuth: float | None) -> dict[str, list[float]]:
    """Model semivariogram ``gamma(h) = sill - C(h)`` from just above 0 to ``cutoff``.

    Along ``azimuth`` (degrees clockwise from north) the offsets are
    ``dx = h sin(azimuth)``, ``dy = h cos(azimuth)``. With ``azimuth=None``
    the curve is the average over directions every 5 degrees, which is what
    an omnidirectional semivariogram sees when pair directions are spread
    evenly. The curve starts at ``cutoff / 1000`` so the nugget shows as its
    intercept.
    """
    h = np.linspace(cutoff / 1000.0, cutoff, MODEL_CURVE_POINTS)
    azimuths = np.arange(0.0, 180.0, 5.0) if azimuth is None else np.array([azimuth], dtype=float)
    theta = np.radians(azimuths)[:, None]
    gamma = covariance.semivariogram(h[None, :] * np.sin(theta), h[None, :] * np.cos(theta)).mean(axis=0)
    return {"distance": h.tolist(), "gamma": gamma.tolist()}


def range_ellipse(structure: Any, centre: np.ndarray, scale: float = 1.0, points: int = 73) -> dict[str, list[float]]:
    """Outline of a structure's effective-range ellipse around ``centre`` (CRS units), drawn at ``scale``.

    The semi-major axis is ``scale`` times the effective range along the
    azimuth, the semi-minor axis that times the ratio; a point at angle
    ``t`` is ``centre + a cos(t) u + b sin(t) v`` with ``u = (sin az, cos az)``
    and ``v = (cos az, -sin az)``.
    """
    a = scale * structure.effective_range
    b = a * structure.ratio
    azimuth = math.radians(structure.azimuth)
    t = np.linspace(0.0, 2.0 * math.pi, points)
    x = centre[0] + a * np.cos(t) * math.sin(azimuth) + b * np.sin(t) * math.cos(azimuth)
    y = centre[1] + a * np.cos(t) * math.cos(azimuth) - b * np.sin(t) * math.sin(azimuth)
    return {"x": x.tolist(), "y": y.tolist()}
