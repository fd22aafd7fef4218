"""Anisotropic covariance structures and the nugget-plus-structures model.

Coordinates are ``(n, 2)`` arrays of easting and northing in a projected
CRS. A :class:`Structure` has a partial sill (attribute units squared), a
range ``a`` along its major axis (CRS units), the azimuth of that axis in
degrees clockwise from grid north in [0, 180), and the ratio of minor to
major range in (0, 1]. The scaled distance between two points separated by
``(dx, dy)`` is::

    d_major = dx sin(theta) + dy cos(theta)
    d_minor = dx cos(theta) - dy sin(theta)
    r = sqrt((d_major / a)**2 + (d_minor / (ratio a))**2)

and the structure's covariance is ``partial_sill * rho(r)`` with ``rho``
from :mod:`.correlation`. A :class:`CovarianceModel` adds a nugget (the
variance of measurement error and micro-scale variation) on the diagonal
of a covariance matrix between a point set and itself.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from scipy.spatial import distance

from ..errors import FieldcastError
from .correlation import check_family, correlation, correlation_derivative, effective_range_factor

MAX_SILL = 1e100
"""Largest variance accepted for a nugget, a partial sill or their total (attribute units squared): beyond it
products of covariances in the kriging systems overflow double precision."""


def check_variance(name: str, value: float) -> None:
    """Refuse a nugget or partial sill that is not a finite number in [0, :data:`MAX_SILL`], naming it."""
    if not (0 <= value <= MAX_SILL):
        raise FieldcastError(f"The {name} must be a finite number from 0 to {MAX_SILL:g} (attribute units "
                             f"squared); got {value!r}. Give a non-negative {name}; for data whose variance is "
                             "that large, rescale the attribute to larger units first.")


def pairwise_offsets(a_xy: np.ndarray, b_xy: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Easting and northing offsets ``a - b`` between every pair of points.

    Parameters
    ----------
    a_xy, b_xy : ndarray of shape (n, 2) and (m, 2)
        Coordinates; ``b_xy`` defaults to ``a_xy``.

    Returns
    -------
    dx, dy : ndarray of shape (n, m)
    """
    a_xy = np.asarray(a_xy, dtype=float)
    b_xy = a_xy if b_xy is None else np.asarray(b_xy, dtype=float)
    dx = a_xy[:, 0:1] - b_xy[:, 0][None, :]
    dy = a_xy[:, 1:2] - b_xy[:, 1][None, :]
    return dx, dy


@dataclass(frozen=True)
class Structure:
    """One nested covariance structure ``partial_sill * rho(r)``.

    Attributes
    ----------
    family : str
        Correlation family, one of :data:`.correlation.FAMILIES`.
    partial_sill : float
        Variance contributed by this structure (attribute units squared).
    range : float
        Distance parameter ``a`` along the major axis (CRS units).
    azimuth : float
        Major-axis direction in degrees clockwise from grid north, [0, 180).
    ratio : float
        Minor range divided by major range, in (0, 1]; 1 is isotropic.
    smoothness : float or None
        Matérn ``nu`` for the ``"matern"`` family, else None.
    """

    family: str
    partial_sill: float
    range: float
    azimuth: float = 0.0
    ratio: float = 1.0
    smoothness: float | None = None

    def __post_init__(self) -> None:
        check_family(self.family, self.smoothness)
        check_variance("partial sill of a covariance structure", self.partial_sill)
        if not (self.range > 0 and math.isfinite(self.range)):
            raise FieldcastError(f"The range of a covariance structure must be a finite positive distance (CRS "
                                 f"units); got {self.range!r}. Give a range above 0.")
        if not (0 < self.ratio <= 1):
            raise FieldcastError(f"The minor/major range ratio of a covariance structure must be above 0 and at most "
                                 f"1; got {self.ratio!r}. Give a ratio in (0, 1] (1 for an isotropic structure).")
        if not math.isfinite(self.azimuth):
            raise FieldcastError(f"The azimuth of a covariance structure must be a finite angle (degrees clockwise "
                                 f"from grid north); got {self.azimuth!r}. Give an azimuth from 0 to 180 (0 for an "
                                 "isotropic structure).")
        object.__setattr__(self, "azimuth", float(self.azimuth) % 180.0)

    @property
    def effective_range(self) -> float:
        """Major-axis distance where correlation falls to 0.05 (CRS units)."""
        return self.range * effective_range_factor(self.family, self.smoothness)

    def axis_offsets(self, dx: np.ndarray, dy: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Offsets along the major and minor axes, in CRS units."""
        if self.azimuth == 0.0:  # the rotation below is then exact: skip its four array operations
            return dy, dx
        theta = math.radians(self.azimuth)
        s, c = math.sin(theta), math.cos(theta)
        return dx * s + dy * c, dx * c - dy * s

    def scaled_distance(self, dx: np.ndarray, dy: np.ndarray) -> np.ndarray:
        """Dimensionless anisotropic distance ``r`` for offsets ``dx, dy``."""
        major, minor = self.axis_offsets(dx, dy)
        a = self.range
        return np.sqrt((major / a) ** 2 + (minor / (a * self.ratio)) ** 2)

    def scaled_coordinates(self, xy: np.ndarray, origin: np.ndarray) -> np.ndarray:
        """Coordinates rotated to the axes and divided by the axis ranges (dimensionless).

        Euclidean distances between scaled coordinates are the scaled
        distances ``r``; ``origin`` is subtracted first to keep precision.
        """
        major, minor = self.axis_offsets(xy[:, 0] - origin[0], xy[:, 1] - origin[1])
        return np.column_stack([major / self.range, minor / (self.range * self.ratio)])

    def covariance_between(self, a_xy: np.ndarray, b_xy: np.ndarray) -> np.ndarray:
        """Covariance between two point sets, shape (n, m).

        Equal to ``covariance_from_offsets(*pairwise_offsets(a_xy, b_xy))``
        but faster: the points are scaled once each and the distances
        computed by :func:`scipy.spatial.distance.cdist`.
        """
        origin = a_xy[0] if len(a_xy) else np.zeros(2)
        r = distance.cdist(self.scaled_coordinates(a_xy, origin), self.scaled_coordinates(b_xy, origin))
        return self.partial_sill * correlation(self.family, r, self.smoothness)

    def covariance_from_offsets(self, dx: np.ndarray, dy: np.ndarray) -> np.ndarray:
        """Covariance ``partial_sill * rho(r)`` for offsets ``dx, dy``."""
        return self.partial_sill * correlation(self.family, self.scaled_distance(dx, dy), self.smoothness)

    def gradients_from_offsets(self, dx: np.ndarray, dy: np.ndarray, anisotropy: bool = True) -> dict[str, np.ndarray]:
        """Derivatives of the covariance with respect to the fit parameters.

        Keys are ``log_partial_sill``, ``log_range``, ``log_ratio`` and
        ``azimuth`` (per radian); the last two only when ``anisotropy`` (an
        isotropic fit does not need them, and they cost a third of the work).
        Derivatives with respect to the Matérn smoothness are not given in
        closed form (the order derivative of the Bessel function has none);
        the fitter differences them.
        """
        major, minor = self.axis_offsets(dx, dy)
        a, q = self.range, self.ratio
        u = major / a
        v = minor / (a * q)
        r = np.sqrt(u * u + v * v)
        rho = correlation(self.family, r, self.smoothness)
        drho = self.partial_sill * correlation_derivative(self.family, r, self.smoothness)
        if not anisotropy:
            return {"log_partial_sill": self.partial_sill * rho, "log_range": -drho * r}
        safe_r = np.where(r > 0, r, 1.0)
        # r^2 = u^2 + v^2 with u = major / a, v = minor / (a q)
        dr_dlog_range = -r
        dr_dlog_ratio = np.where(r > 0, -(v * v) / safe_r, 0.0)
        # d major / d theta = minor ; d minor / d theta = -major
        dr_dtheta = np.where(r > 0, (u * v / q) * (q * q - 1.0) / safe_r, 0.0)
        return {
            "log_partial_sill": self.partial_sill * rho,
            "log_range": drho * dr_dlog_range,
            "log_ratio": drho * dr_dlog_ratio,
            "azimuth": drho * dr_dtheta,
        }

    def to_dict(self) -> dict:
        """Plain-data form used by the model file."""
        return {
            "family": self.family,
            "partial_sill": float(self.partial_sill),
            "range": float(self.range),
            "effective_range": float(self.effective_range),
            "azimuth": float(self.azimuth),
            "ratio": float(self.ratio),
            "smoothness": None if self.smoothness is None else float(self.smoothness),
        }

    @classmethod
    def from_dict(cls, data: dict) -> Structure:
        """Inverse of :meth:`to_dict` (``effective_range`` is recomputed)."""
        smooth = data.get("smoothness")
        return cls(
            family=str(data["family"]),
            partial_sill=float(data["partial_sill"]),
            range=float(data["range"]),
            azimuth=float(data.get("azimuth", 0.0)),
            ratio=float(data.get("ratio", 1.0)),
            smoothness=None if smooth is None else float(smooth),
        )


def search_frame(structure: Structure, xy: np.ndarray) -> np.ndarray:
    """Coordinates ``(major, minor / ratio)`` in which distances follow the structure's anisotropy.

    Parameters
    ----------
    structure : Structure
        Supplies the azimuth and the minor/major ratio.
    xy : ndarray of shape (n, 2)
        Points in CRS units.

    Returns
    -------
    ndarray of shape (n, 2)
        Points in the stretched frame (CRS units along the major axis).
    """
    major, minor = structure.axis_offsets(xy[:, 0], xy[:, 1])
    return np.column_stack([major, minor / structure.ratio])


@dataclass(frozen=True)
class CovarianceModel:
    """Nugget plus one or two nested structures.

    ``C(h) = nugget * [h == 0 on the same sample] + sum_k partial_sill_k rho_k(r_k)``
    in attribute units squared.
    """

    structures: tuple[Structure, ...]
    nugget: float = 0.0

    def __post_init__(self) -> None:
        structures = tuple(self.structures)
        if not 1 <= len(structures) <= 2:
            raise FieldcastError(f"A covariance model has one or two structures besides the nugget; got "
                                 f"{len(structures)}. Give one structure, or two for a nested model.")
        check_variance("nugget", self.nugget)
        object.__setattr__(self, "structures", structures)
        check_variance("sill (nugget plus partial sills)", self.sill)

    @property
    def sill(self) -> float:
        """Total variance: nugget plus all partial sills."""
        return self.nugget + sum(s.partial_sill for s in self.structures)

    @property
    def field_variance(self) -> float:
        """Variance of the latent field (sill without the nugget)."""
        return sum(s.partial_sill for s in self.structures)

    def covariance_from_offsets(self, dx: np.ndarray, dy: np.ndarray) -> np.ndarray:
        """Covariance of the latent field (structures only) for offsets."""
        total = self.structures[0].covariance_from_offsets(dx, dy)
        for s in self.structures[1:]:
            total = total + s.covariance_from_offsets(dx, dy)
        return total

    def cross_covariance(self, a_xy: np.ndarray, b_xy: np.ndarray) -> np.ndarray:
        """Latent-field covariance between two point sets, shape (n, m), no nugget."""
        a_xy = np.asarray(a_xy, dtype=float)
        b_xy = np.asarray(b_xy, dtype=float)
        total = self.structures[0].covariance_between(a_xy, b_xy)
        for s in self.structures[1:]:
            total += s.covariance_between(a_xy, b_xy)
        return total

    def data_covariance(self, xy: np.ndarray, error_variance: np.ndarray | None = None) -> np.ndarray:
        """Covariance matrix of observations at ``xy``: structures plus nugget on the diagonal.

        ``error_variance`` (n,), when given, is each observation's own measurement-error variance (attribute
        units squared), added to the diagonal beside the nugget: ``K = C + nugget I + diag(error_variance)``.
        """
        matrix = self.cross_covariance(xy, xy)
        own = 0.0 if error_variance is None else error_variance
        matrix[np.diag_indices_from(matrix)] += self.nugget + own
        return matrix

    def semivariogram(self, dx: np.ndarray, dy: np.ndarray) -> np.ndarray:
        """Model semivariogram ``gamma = sill - C`` (nugget included for h > 0)."""
        h = np.hypot(dx, dy)
        return np.where(h > 0, self.sill - self.covariance_from_offsets(dx, dy), 0.0)

    def scaled(self, factor: float) -> CovarianceModel:
        """The same model with every variance multiplied by ``factor``."""
        return CovarianceModel(
            tuple(replace(s, partial_sill=s.partial_sill * factor) for s in self.structures),
            self.nugget * factor,
        )

    def to_dict(self) -> dict:
        """Plain-data form: ``{"nugget": ..., "structures": [...]}``."""
        return {"nugget": float(self.nugget), "structures": [s.to_dict() for s in self.structures]}

    @classmethod
    def from_dict(cls, data: dict) -> CovarianceModel:
        """Inverse of :meth:`to_dict`."""
        return cls(tuple(Structure.from_dict(s) for s in data["structures"]), float(data.get("nugget", 0.0)))
