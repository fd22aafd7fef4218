"""Transforms of the attribute before modelling, and back-transforms of predictions.

``kind = "log"`` models ``Y = ln(Z + offset)`` as a Gaussian field. If the
kriging prediction of ``Y`` at a location is ``mu`` with variance
``s2``, and ``Y`` given the data is taken as normal, then ``Z + offset``
is lognormal and (Aitchison & Brown 1957, *The Lognormal Distribution*,
eq. 2.7 and 2.8; Journel 1980, *Math. Geol.* 12(4), 285-303):

- median:   ``exp(mu) - offset``
- mean:     ``exp(mu + s2 / 2) - offset``
- variance: ``exp(2 mu + s2) * (exp(s2) - 1)``
- standard deviation: the square root of the variance,
  ``exp(mu + s2 / 2) * sqrt(exp(s2) - 1)``
- quantile at probability ``p``: ``exp(mu + z_p * s) - offset`` with ``s = sqrt(s2)``
  and ``z_p`` the standard normal quantile (a monotone transform carries
  quantiles over unchanged, Aitchison & Brown 1957, section 2.2)

The mean formula is exact for simple kriging; with an estimated mean
(ordinary or universal kriging) Journel (1980) subtracts the Lagrange
multiplier inside the exponent, a correction this module leaves out, so
the back-transformed mean is slightly high where the mean is poorly
determined. The median is the robust choice for maps and is the default.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import FieldcastError

TRANSFORM_KINDS = ("none", "log")
"""Names of the supported transforms."""


@dataclass(frozen=True)
class Transform:
    """A monotone transform of the attribute.

    Attributes
    ----------
    kind : str
        ``"none"`` or ``"log"`` (natural logarithm).
    offset : float
        Added before the logarithm (attribute units); 0 by default.
    """

    kind: str = "none"
    offset: float = 0.0

    def __post_init__(self) -> None:
        if self.kind not in TRANSFORM_KINDS:
            raise FieldcastError(f"Unknown transform {self.kind!r}; choose one of {', '.join(TRANSFORM_KINDS)}.")
        if not np.isfinite(self.offset):
            raise FieldcastError(f"The log offset (LOG_OFFSET) must be a finite number of attribute units; got "
                                 f"{self.offset!r}. Give 0 for values above zero, or a number that lifts the "
                                 "smallest value above zero.")

    def forward(self, values: np.ndarray) -> np.ndarray:
        """Transform attribute values into the modelling scale."""
        values = np.asarray(values, dtype=float)
        if self.kind == "none":
            return values.copy()
        missing = int(np.count_nonzero(~np.isfinite(values)))
        if missing:
            raise FieldcastError(
                f"{missing} value(s) are NaN or infinite; drop or fill them before the log transform."
            )
        shifted = values + self.offset
        bad = int(np.count_nonzero(~(shifted > 0)))
        if bad:
            raise FieldcastError(
                f"The log transform needs values above {0.0 - self.offset:g} (value + offset > 0), but {bad} "
                f"value(s) are not (smallest {np.min(values):g}). Set a log offset larger than "
                f"{0.0 - np.min(values):g}, or use no transform."
            )
        return np.log(shifted)

    def back_median(self, mean: np.ndarray) -> np.ndarray:
        """Median of the attribute given the modelling-scale prediction (original units)."""
        mean = np.asarray(mean, dtype=float)
        if self.kind == "none":
            return mean.copy()
        return np.exp(mean) - self.offset

    def back_mean(self, mean: np.ndarray, variance: np.ndarray) -> np.ndarray:
        """Expected attribute value, lognormal correction ``exp(mu + s2/2)`` (original units)."""
        mean = np.asarray(mean, dtype=float)
        if self.kind == "none":
            return mean.copy()
        return np.exp(mean + 0.5 * np.asarray(variance, dtype=float)) - self.offset

    def back_variance(self, mean: np.ndarray, variance: np.ndarray) -> np.ndarray:
        """Variance of the attribute, ``exp(2 mu + s2) (exp(s2) - 1)`` (original units squared)."""
        variance = np.asarray(variance, dtype=float)
        if self.kind == "none":
            return variance.copy()
        mean = np.asarray(mean, dtype=float)
        return np.exp(2.0 * mean + variance) * np.expm1(variance)

    def back_sd(self, mean: np.ndarray, variance: np.ndarray) -> np.ndarray:
        """Standard deviation of the attribute, ``exp(mu + s2/2) sqrt(exp(s2) - 1)`` (original units).

        For no transform it is ``sqrt(s2)``. For a log model it is the square root of the lognormal
        variance :meth:`back_variance` (Aitchison & Brown 1957, eq. 2.8), the spread about the
        lognormal mean.
        """
        return np.sqrt(self.back_variance(mean, variance))

    def back_quantile(self, mean: np.ndarray, variance: np.ndarray, z: float) -> np.ndarray:
        """Quantile of the attribute at standard normal quantile ``z``: ``mu + z s`` or ``exp(mu + z s) - offset``.

        ``s = sqrt(s2)``. For a log model this is the quantile of the lognormal distribution of
        ``Z + offset`` minus the offset (original units); ``z = 0`` gives :meth:`back_median`.
        """
        mean = np.asarray(mean, dtype=float)
        shifted = mean + z * np.sqrt(np.asarray(variance, dtype=float))
        if self.kind == "none":
            return shifted
        return np.exp(shifted) - self.offset

    @property
    def units_note(self) -> str:
        """Plain words for band descriptions: what scale the numbers are on."""
        if self.kind == "none":
            return "attribute units"
        return f"natural log of (attribute + {self.offset:g})"

    def to_dict(self) -> dict:
        """Plain-data form used by the model file."""
        return {"kind": self.kind, "offset": float(self.offset)}

    @classmethod
    def from_dict(cls, data: dict) -> Transform:
        """Inverse of :meth:`to_dict`."""
        return cls(str(data.get("kind", "none")), float(data.get("offset", 0.0)))
