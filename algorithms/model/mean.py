"""Mean (trend) models and their design matrices.

The mean of the attribute at a location ``x`` is ``f(x)^T beta`` where
``f`` is a vector of basis functions:

==========  ==========================================================
kind        basis ``f(x)``
==========  ==========================================================
known       none: the mean is the fixed ``known_value`` (simple kriging)
constant    1 (ordinary kriging)
linear      1, u, v (universal kriging)
quadratic   1, u, v, u**2, u*v, v**2 (universal kriging)
==========  ==========================================================

with ``u = (easting - origin_x) / scale`` and ``v = (northing - origin_y) /
scale`` (dimensionless; centring and scaling keep the design well
conditioned). Extra covariate columns supplied by the caller (external
drift) are appended after the coordinate terms, in the order of
``covariate_names``.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import FieldcastError

MEAN_KINDS = ("known", "constant", "linear", "quadratic")
"""Names of the mean models."""


@dataclass(frozen=True)
class MeanModel:
    """A mean model and the coordinate frame its trend terms use.

    Attributes
    ----------
    kind : str
        One of :data:`MEAN_KINDS`.
    known_value : float
        The mean used when ``kind == "known"`` (attribute units).
    origin : tuple of float
        Easting and northing subtracted before the trend terms (CRS units).
    scale : float
        Distance dividing the centred coordinates (CRS units).
    covariate_names : tuple of str
        Names of external-drift columns, in design-matrix order.
    """

    kind: str = "constant"
    known_value: float = 0.0
    origin: tuple[float, float] = (0.0, 0.0)
    scale: float = 1.0
    covariate_names: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        if self.kind not in MEAN_KINDS:
            raise FieldcastError(f"Unknown mean model {self.kind!r}; choose one of {', '.join(MEAN_KINDS)}.")
        if not (self.scale > 0 and math.isfinite(self.scale)):
            raise FieldcastError(f"The trend scale must be a finite positive distance (CRS units); got "
                                 f"{self.scale!r}.")
        if not math.isfinite(self.known_value):
            raise FieldcastError(f"The known mean must be a finite number (attribute units, modelling scale); got "
                                 f"{self.known_value!r}. Give the mean as a number, or use a constant mean "
                                 "estimated from the samples.")
        if not all(math.isfinite(float(v)) for v in self.origin):
            raise FieldcastError(f"The trend origin must be a finite easting and northing (CRS units); got "
                                 f"{tuple(self.origin)!r}.")
        if self.kind == "known" and self.covariate_names:
            raise FieldcastError("A known mean cannot have covariates; use a constant mean with covariates.")
        object.__setattr__(self, "origin", (float(self.origin[0]), float(self.origin[1])))
        object.__setattr__(self, "covariate_names", tuple(str(c) for c in self.covariate_names))

    @classmethod
    def for_data(cls, kind: str, xy: np.ndarray, covariate_names: tuple[str, ...] = (),
                 known_value: float = 0.0) -> MeanModel:
        """A mean model whose frame is centred on the data and scaled by half their extent."""
        xy = np.asarray(xy, dtype=float)
        low, high = xy.min(axis=0), xy.max(axis=0)
        origin = (low + high) / 2.0
        half_extent = float(np.max(high - low)) / 2.0
        return cls(kind, known_value, (float(origin[0]), float(origin[1])), half_extent if half_extent > 0 else 1.0,
                   tuple(covariate_names))

    @property
    def n_terms(self) -> int:
        """Number of columns of the design matrix."""
        coordinate_terms = {"known": 0, "constant": 1, "linear": 3, "quadratic": 6}[self.kind]
        return coordinate_terms + len(self.covariate_names)

    @property
    def term_names(self) -> tuple[str, ...]:
        """Column names: ``1, u, v, u2, uv, v2`` as used, then covariates."""
        names = {"known": (), "constant": ("1",), "linear": ("1", "u", "v"),
                 "quadratic": ("1", "u", "v", "u2", "uv", "v2")}[self.kind]
        return names + self.covariate_names

    def design(self, xy: np.ndarray, covariates: np.ndarray | None = None) -> np.ndarray:
        """Design matrix ``F`` of shape (n, n_terms) at locations ``xy``.

        Parameters
        ----------
        xy : ndarray of shape (n, 2)
            Locations in CRS units.
        covariates : ndarray of shape (n, len(covariate_names)), optional
            External-drift values at the same locations; required when the
            model names covariates.
        """
        xy = np.asarray(xy, dtype=float)
        u = (xy[:, 0] - self.origin[0]) / self.scale
        v = (xy[:, 1] - self.origin[1]) / self.scale
        one = np.ones_like(u)
        columns = {"known": [], "constant": [one], "linear": [one, u, v],
                   "quadratic": [one, u, v, u * u, u * v, v * v]}[self.kind]
        if self.covariate_names:
            if covariates is None:
                raise FieldcastError(
                    f"The mean model uses covariates {', '.join(self.covariate_names)}; supply their values."
                )
            covariates = np.asarray(covariates, dtype=float).reshape(len(xy), -1)
            if covariates.shape[1] != len(self.covariate_names):
                raise FieldcastError(
                    f"Expected {len(self.covariate_names)} covariate columns, got {covariates.shape[1]}."
                )
            if not np.all(np.isfinite(covariates)):
                raise FieldcastError("Covariate values contain NaN or infinity; fill or drop those locations.")
            columns = columns + list(covariates.T)
        if not columns:
            return np.zeros((len(xy), 0))
        return np.column_stack(columns)

    def residuals(self, xy: np.ndarray, values: np.ndarray, coefficients: np.ndarray,
                  covariates: np.ndarray | None = None) -> np.ndarray:
        """``values - F beta``: values (n,) at ``xy`` minus the mean with ``coefficients`` (order of
        :attr:`term_names`) and the covariate columns at the same locations; minus the known value for a known
        mean (attribute units)."""
        return np.asarray(values, dtype=float) - self.known_mean(len(xy)) - self.design(xy, covariates) @ np.asarray(
            coefficients, dtype=float).reshape(self.n_terms)

    def known_mean(self, n: int) -> np.ndarray:
        """The fixed mean vector for simple kriging (zeros for other kinds)."""
        return np.full(n, self.known_value if self.kind == "known" else 0.0)

    def to_dict(self) -> dict:
        """Plain-data form used by the model file."""
        return {
            "kind": self.kind,
            "known_value": float(self.known_value),
            "origin": list(self.origin),
            "scale": float(self.scale),
            "covariates": list(self.covariate_names),
        }

    @classmethod
    def from_dict(cls, data: dict) -> MeanModel:
        """Inverse of :meth:`to_dict`."""
        return cls(
            str(data["kind"]),
            float(data.get("known_value", 0.0)),
            tuple(data.get("origin", (0.0, 0.0))),
            float(data.get("scale", 1.0)),
            tuple(data.get("covariates", ())),
        )
