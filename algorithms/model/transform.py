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

``kind = "boxcox"`` models ``Y = ((Z + offset)^lambda - 1) / lambda`` (Box & Cox 1964, *J. R. Stat.
Soc. B* 26, 211-252); ``lambda = 0`` is the log transform, and then every formula above is used as it
stands. ``kind = "normalscore"`` models the normal scores of :mod:`.normal_score` (knots built from the
declustered empirical distribution, stated tails). For both, a Gaussian predictive ``N(mu, s2)`` is
back-transformed through the monotone inverse ``g``: the median is ``g(mu)`` and the quantile at ``z_p``
is ``g(mu + z_p s)`` exactly; the mean ``E g(Y)`` and the variance ``E g(Y)^2 - (E g(Y))^2`` by
Gauss-Hermite quadrature of order :data:`HERMITE_ORDER` (Abramowitz & Stegun 1964, 25.4.46):
``E g(Y) = sum_i w_i g(mu + sqrt(2) s x_i) / sqrt(pi)``. The Box-Cox inverse is
``(lambda y + 1)^(1/lambda) - offset`` where ``lambda y + 1 > 0``; elsewhere it is ``-offset`` (lambda > 0,
the lower end of the range) or infinite (lambda < 0: no finite value; the quantiles there are nodata, and
the mean and variance leave those quadrature nodes out, the predictive distribution truncated to the range).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import FieldcastError, FieldcastUsageError
from .normal_score import TAILS_WORDS, checked_knots, score_knots

TRANSFORM_KINDS = ("none", "log", "boxcox", "normalscore")
"""Names of the supported transforms."""
HERMITE_ORDER = 40
"""Nodes of the Gauss-Hermite rule of the back-transformed mean and variance (Box-Cox, normal score)."""
LAMBDA_LIMIT = 5.0
"""Largest Box-Cox exponent accepted (in absolute value); the estimate searches [-1, 2]."""
_NODES, _WEIGHTS = np.polynomial.hermite.hermgauss(HERMITE_ORDER)


@dataclass(frozen=True)
class Transform:
    """A monotone transform of the attribute.

    Attributes
    ----------
    kind : str
        One of :data:`TRANSFORM_KINDS`: ``"none"``, ``"log"`` (natural logarithm), ``"boxcox"`` or
        ``"normalscore"``.
    offset : float
        Added before the logarithm or the Box-Cox power (attribute units); 0 by default.
    boxcox_lambda : float or None
        The Box-Cox exponent; None while it is still to be estimated (:func:`..fit.transform_fit.fitted_transform`).
    knots : tuple of (float, float)
        The normal-score knots ``(z, y)``, tail knots included (:func:`.normal_score.score_knots`); empty while
        they are still to be built from the samples.
    """

    kind: str = "none"
    offset: float = 0.0
    boxcox_lambda: float | None = None
    knots: tuple[tuple[float, float], ...] = ()

    def __post_init__(self) -> None:
        if self.kind not in TRANSFORM_KINDS:
            raise FieldcastError(f"Unknown transform {self.kind!r}; choose one of {', '.join(TRANSFORM_KINDS)}.")
        if not np.isfinite(self.offset):
            raise FieldcastError(f"The log offset (LOG_OFFSET) must be a finite number of attribute units; got "
                                 f"{self.offset!r}. Give 0 for values above zero, or a number that lifts the "
                                 "smallest value above zero.")
        if self.boxcox_lambda is not None and not -LAMBDA_LIMIT <= self.boxcox_lambda <= LAMBDA_LIMIT:
            raise FieldcastError(f"The Box-Cox lambda (BOXCOX_LAMBDA) must lie between {-LAMBDA_LIMIT:g} and "
                                 f"{LAMBDA_LIMIT:g}; got {self.boxcox_lambda!r}. Leave it empty to estimate it.")
        if self.knots:
            checked_knots(*self._knot_arrays())

    @property
    def positive_only(self) -> bool:
        """Whether the transform needs ``value + offset > 0`` (log and Box-Cox)."""
        return self.kind in ("log", "boxcox")

    @property
    def is_log(self) -> bool:
        """Whether the transform is the natural log: ``"log"``, or ``"boxcox"`` with lambda 0."""
        return self.kind == "log" or (self.kind == "boxcox" and self.boxcox_lambda == 0.0)

    @property
    def complete(self) -> bool:
        """Whether everything the transform needs is known (a Box-Cox lambda, normal-score knots)."""
        return not ((self.kind == "boxcox" and self.boxcox_lambda is None)
                    or (self.kind == "normalscore" and not self.knots))

    def _knot_arrays(self) -> tuple[np.ndarray, np.ndarray]:
        table = np.asarray(self.knots, dtype=float).reshape(-1, 2)
        return table[:, 0], table[:, 1]

    def _require_complete(self) -> None:
        if not self.complete:
            raise FieldcastUsageError(f"The {self.kind} transform is used before its lambda or knots are known.")

    def forward(self, values: np.ndarray) -> np.ndarray:
        """Transform attribute values into the modelling scale."""
        values = np.asarray(values, dtype=float)
        if self.kind == "none":
            return values.copy()
        self._require_complete()
        missing = int(np.count_nonzero(~np.isfinite(values)))
        if missing:
            raise FieldcastError(
                f"{missing} value(s) are NaN or infinite; drop or fill them before the {self.kind} transform."
            )
        if self.kind == "normalscore":
            z, y = self._knot_arrays()
            return np.interp(values, z, y)
        shifted = values + self.offset
        bad = int(np.count_nonzero(~(shifted > 0)))
        if bad:
            raise FieldcastError(
                f"The {self.kind} transform needs values above {0.0 - self.offset:g} (value + offset > 0), but {bad} "
                f"value(s) are not (smallest {np.min(values):g}). Set a log offset larger than "
                f"{0.0 - np.min(values):g}, or use no transform."
            )
        if self.is_log:
            return np.log(shifted)
        return np.expm1(self.boxcox_lambda * np.log(shifted)) / self.boxcox_lambda

    def inverse(self, scores: np.ndarray) -> np.ndarray:
        """The monotone inverse ``g``: attribute values (original units) of modelling-scale values."""
        scores = np.asarray(scores, dtype=float)
        if self.kind == "none":
            return scores.copy()
        self._require_complete()
        if self.is_log:
            return np.exp(scores) - self.offset
        if self.kind == "normalscore":
            z, y = self._knot_arrays()
            return np.interp(scores, y, z)
        base = self.boxcox_lambda * scores + 1.0
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            power = np.exp(np.log(base) / self.boxcox_lambda)
        outside = 0.0 if self.boxcox_lambda > 0 else np.inf
        return np.where(base > 0, power, outside) - self.offset

    def _expectations(self, mean: np.ndarray, variance: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``E g(Y)`` and ``E g(Y)^2`` for ``Y ~ N(mean, variance)`` by Gauss-Hermite quadrature; nodes where ``g``
        has no finite value (Box-Cox, lambda < 0) are left out and the other weights scaled up to sum 1."""
        mean = np.asarray(mean, dtype=float)
        spread = np.sqrt(2.0 * np.clip(np.asarray(variance, dtype=float), 0.0, None))
        shape = np.broadcast(mean, spread).shape
        first, second, total = np.zeros(shape), np.zeros(shape), np.zeros(shape)
        with np.errstate(over="ignore", invalid="ignore"):
            for node, weight in zip(_NODES, _WEIGHTS / np.sqrt(np.pi)):  # one node at a time: memory of one block
                value = self.inverse(mean + spread * node)
                finite = np.isfinite(value)
                value = np.where(finite, value, 0.0)
                first += weight * value
                second += weight * value * value
                total += weight * finite
            return first / total, second / total

    def back_median(self, mean: np.ndarray) -> np.ndarray:
        """Median of the attribute given the modelling-scale prediction, ``g(mu)`` (original units)."""
        return self.inverse(mean)

    def back_mean(self, mean: np.ndarray, variance: np.ndarray) -> np.ndarray:
        """Expected attribute value: lognormal ``exp(mu + s2/2) - offset``, else Gauss-Hermite (original units)."""
        mean = np.asarray(mean, dtype=float)
        if self.kind == "none":
            return mean.copy()
        if self.is_log:
            return np.exp(mean + 0.5 * np.asarray(variance, dtype=float)) - self.offset
        return self._expectations(mean, variance)[0]

    def back_variance(self, mean: np.ndarray, variance: np.ndarray) -> np.ndarray:
        """Variance of the attribute: lognormal ``exp(2 mu + s2) (exp(s2) - 1)``, else Gauss-Hermite
        ``E g^2 - (E g)^2`` clipped at 0 (original units squared)."""
        variance = np.asarray(variance, dtype=float)
        if self.kind == "none":
            return variance.copy()
        mean = np.asarray(mean, dtype=float)
        if self.is_log:
            return np.exp(2.0 * mean + variance) * np.expm1(variance)
        return self.back_moments(mean, variance)[1]

    def back_moments(self, mean: np.ndarray, variance: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """:meth:`back_mean` and :meth:`back_variance` together (one quadrature for Box-Cox and normal score)."""
        if self.kind == "none" or self.is_log:
            return self.back_mean(mean, variance), self.back_variance(mean, variance)
        first, second = self._expectations(mean, variance)
        with np.errstate(invalid="ignore"):
            return first, np.clip(second - first * first, 0.0, None)

    def back_sd(self, mean: np.ndarray, variance: np.ndarray) -> np.ndarray:
        """Standard deviation of the attribute, the square root of :meth:`back_variance` (original units).

        For no transform it is ``sqrt(s2)``. For a log model it is ``exp(mu + s2/2) sqrt(exp(s2) - 1)``, the square
        root of the lognormal variance (Aitchison & Brown 1957, eq. 2.8), the spread about the lognormal mean.
        """
        return np.sqrt(self.back_variance(mean, variance))

    def back_quantile(self, mean: np.ndarray, variance: np.ndarray, z: float) -> np.ndarray:
        """Quantile of the attribute at standard normal quantile ``z``: ``g(mu + z s)``, ``s = sqrt(s2)``.

        Exact for every kind, ``g`` being monotone: ``mu + z s`` without a transform, ``exp(mu + z s) - offset``
        for a log model (the lognormal quantile); ``z = 0`` gives :meth:`back_median`.
        """
        mean = np.asarray(mean, dtype=float)
        return self.inverse(mean + z * np.sqrt(np.asarray(variance, dtype=float)))

    @property
    def units_note(self) -> str:
        """Plain words for band descriptions: what scale the numbers are on."""
        if self.kind == "none":
            return "attribute units"
        if self.is_log:
            return f"natural log of (attribute + {self.offset:g})"
        if self.kind == "boxcox":
            return f"Box-Cox transform (lambda {self.boxcox_lambda:g}) of (attribute + {self.offset:g})"
        return "normal scores of the attribute"

    def to_dict(self) -> dict:
        """Plain-data form used by the model file."""
        data = {"kind": self.kind, "offset": float(self.offset)}
        if self.kind == "boxcox":
            data["lambda"] = self.boxcox_lambda
        if self.kind == "normalscore":
            data["knots"] = [[float(z), float(y)] for z, y in self.knots]
            data["tails"] = TAILS_WORDS
        return data

    @classmethod
    def from_dict(cls, data: dict) -> Transform:
        """Inverse of :meth:`to_dict`."""
        lam = data.get("lambda")
        knots = tuple((float(z), float(y)) for z, y in data.get("knots", ()))
        return cls(str(data.get("kind", "none")), float(data.get("offset", 0.0)),
                   None if lam is None else float(lam), knots)

    @classmethod
    def normal_score(cls, values: np.ndarray, weights: np.ndarray | None = None) -> Transform:
        """The normal-score transform of ``values`` (attribute units), weighted by declustering ``weights``."""
        z, y = score_knots(values, weights)
        return cls("normalscore", knots=tuple(zip(z.tolist(), y.tolist())))
