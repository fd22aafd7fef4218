"""Covariance-model parameters as one bounded vector in log space, for the optimiser.

Following the hyperparameter convention of scikit-learn's Gaussian-process
kernels, every positive parameter is stored as its natural logarithm, so a
step of the optimiser is a relative change and positivity needs no
constraint. The vector of a :class:`ParameterLayout` holds, in order:

=======================  =====================================================
name                     meaning
=======================  =====================================================
``log_partial_sill_k``   log of the partial sill of structure ``k`` (1 or 2)
``log_range_k``          log of the major-axis range ``a`` of structure ``k``
``log_ratio``            log of the minor/major range ratio (anisotropy only)
``azimuth``              major-axis direction in radians clockwise from north
                         (anisotropy only)
``log_smoothness``       log of the Matérn ``nu`` (family ``"matern"`` with
                         the smoothness left free)
``log_nugget``           log of the nugget (absent when the nugget is held
                         fixed, :attr:`ParameterLayout.nugget`)
=======================  =====================================================

Nested structures share one geometric anisotropy (ratio and azimuth) and one
smoothness: a field usually has one preferred direction, and two independent
directions or smoothness values are rarely identifiable from a few hundred
samples.

Bounds, in the units of the data the vector describes (see :func:`parameter_bounds`):

* range ``a``: from :data:`RANGE_LOWER_FRACTION` (1/10) of the smallest nonzero
  distance between samples (a shorter range is indistinguishable from a nugget
  at this sampling density) to :data:`RANGE_UPPER_FACTOR` (5) times the data
  diameter (the largest distance between samples; a longer range means the
  data show no sill);
* ratio: :data:`RATIO_LOWER` (0.05) to 1; a smaller ratio makes the minor
  range shorter than sample spacing along most directions and usually stands
  for a trend the mean model lacks;
* partial sill: :data:`PARTIAL_SILL_BOUNDS` times the sample variance
  (1e-4 to 50; the upper end leaves room for the large sill that goes with a
  long range);
* nugget: :data:`NUGGET_BOUNDS` times the sample variance (1e-6 to 10; the
  small positive floor keeps the covariance matrix invertible when samples
  nearly coincide);
* smoothness: :data:`.correlation.SMOOTHNESS_BOUNDS` (0.2 to 5).

All of these are choices of this project (common practice), not published constants.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from .correlation import SMOOTHNESS_BOUNDS, check_family
from .covariance import CovarianceModel, Structure

RANGE_LOWER_FRACTION = 0.1
"""Lower bound of a range as a fraction of the smallest nonzero sample spacing."""

RANGE_UPPER_FACTOR = 5.0
"""Upper bound of a range as a multiple of the data diameter."""

RATIO_LOWER = 0.05
"""Lower bound of the minor/major range ratio."""

PARTIAL_SILL_BOUNDS = (1e-4, 50.0)
"""Bounds of a partial sill as multiples of the sample variance."""

NUGGET_BOUNDS = (1e-6, 10.0)
"""Bounds of the nugget as multiples of the sample variance."""

SMOOTHNESS_STEP = 1e-6
"""Step in ``log nu`` of the one-sided difference for the smoothness derivative."""


@dataclass(frozen=True)
class DataScales:
    """Sizes of a data set that set the parameter bounds.

    Attributes
    ----------
    smallest_spacing : float
        Smallest nonzero distance between two samples (CRS units).
    diameter : float
        Largest distance between two samples (CRS units).
    variance : float
        Sample variance of the values (value units squared).
    """

    smallest_spacing: float
    diameter: float
    variance: float


@dataclass(frozen=True)
class ParameterLayout:
    """Which parameters a fit estimates, and where each sits in the vector.

    Attributes
    ----------
    family : str
        Correlation family of every structure.
    n_structures : int
        1, or 2 for a nested (short- plus long-range) model.
    anisotropy : bool
        Estimate ratio and azimuth; otherwise ratio 1 and azimuth 0.
    smoothness : float or None
        Fixed Matérn ``nu`` for family ``"matern"``; None fits it.
    nugget : float or None
        Nugget held at this value (the units of the variances the vector describes; 0 allowed) and left out of
        the vector; None fits it.
    """

    family: str
    n_structures: int = 1
    anisotropy: bool = False
    smoothness: float | None = None
    nugget: float | None = None

    def __post_init__(self) -> None:
        if self.family != "matern" or self.smoothness is not None:
            check_family(self.family, self.smoothness)

    @property
    def fits_smoothness(self) -> bool:
        """True when the Matérn smoothness is one of the parameters."""
        return self.family == "matern" and self.smoothness is None

    @property
    def names(self) -> tuple[str, ...]:
        """Parameter names in vector order."""
        names = []
        for k in range(1, self.n_structures + 1):
            names += [f"log_partial_sill_{k}", f"log_range_{k}"]
        if self.anisotropy:
            names += ["log_ratio", "azimuth"]
        if self.fits_smoothness:
            names.append("log_smoothness")
        if self.nugget is None:
            names.append("log_nugget")
        return tuple(names)

    @property
    def n_parameters(self) -> int:
        """Number of covariance parameters estimated."""
        return len(self.names)

    def index(self, name: str) -> int:
        """Position of a parameter in the vector."""
        return self.names.index(name)

    def unpack(self, theta: np.ndarray) -> CovarianceModel:
        """The covariance model a parameter vector describes."""
        value = dict(zip(self.names, np.asarray(theta, dtype=float)))
        ratio = math.exp(min(value["log_ratio"], 0.0)) if self.anisotropy else 1.0
        azimuth = math.degrees(value["azimuth"]) if self.anisotropy else 0.0
        nu = math.exp(value["log_smoothness"]) if self.fits_smoothness else self.smoothness
        if nu is not None:
            nu = min(max(nu, SMOOTHNESS_BOUNDS[0]), SMOOTHNESS_BOUNDS[1])
        structures = tuple(
            Structure(self.family, math.exp(value[f"log_partial_sill_{k}"]), math.exp(value[f"log_range_{k}"]),
                      azimuth, ratio, nu)
            for k in range(1, self.n_structures + 1)
        )
        return CovarianceModel(structures, math.exp(value["log_nugget"]) if self.nugget is None else self.nugget)

    def pack(self, model: CovarianceModel) -> np.ndarray:
        """The parameter vector of a model (inverse of :meth:`unpack`)."""
        first = model.structures[0]
        value = {"log_ratio": math.log(first.ratio), "azimuth": math.radians(first.azimuth)}
        if self.nugget is None:
            value["log_nugget"] = math.log(model.nugget)
        if self.fits_smoothness:
            value["log_smoothness"] = math.log(first.smoothness)
        for k, structure in enumerate(model.structures, start=1):
            value[f"log_partial_sill_{k}"] = math.log(structure.partial_sill)
            value[f"log_range_{k}"] = math.log(structure.range)
        return np.array([value[name] for name in self.names])


def parameter_bounds(layout: ParameterLayout, scales: DataScales) -> list[tuple[float | None, float | None]]:
    """Bounds of every entry of the parameter vector (log space; azimuth unbounded).

    See the module docstring for the numbers and why they were chosen.
    """
    log_range = (math.log(RANGE_LOWER_FRACTION * scales.smallest_spacing),
                 math.log(RANGE_UPPER_FACTOR * scales.diameter))
    log_variance = math.log(scales.variance)
    by_prefix = {
        "log_partial_sill": tuple(log_variance + math.log(b) for b in PARTIAL_SILL_BOUNDS),
        "log_range": log_range,
        "log_ratio": (math.log(RATIO_LOWER), 0.0),
        "azimuth": (None, None),
        "log_smoothness": tuple(math.log(b) for b in SMOOTHNESS_BOUNDS),
        "log_nugget": tuple(log_variance + math.log(b) for b in NUGGET_BOUNDS),
    }
    return [by_prefix[name.rsplit("_", 1)[0] if name[-1].isdigit() else name] for name in layout.names]


def covariance_derivatives(
    layout: ParameterLayout, model: CovarianceModel, dx: np.ndarray, dy: np.ndarray
) -> tuple[np.ndarray, list[tuple[int, np.ndarray, float]]]:
    """Latent-field covariance at offsets and its derivatives by parameter.

    Parameters
    ----------
    layout : ParameterLayout
    model : CovarianceModel
        The model ``layout.unpack(theta)``.
    dx, dy : ndarray
        Offsets of the distinct sample pairs (any shape; the fitter passes
        one triangle of the offset matrix, as 1-D arrays).

    Returns
    -------
    covariance : ndarray
        ``sum_k partial_sill_k rho_k`` at the offsets (no nugget).
    derivatives : list of (index, ndarray, float)
        ``(j, dC/dtheta_j at the offsets, dC/dtheta_j at zero offset)``. A
        parameter shared by the structures (ratio, azimuth) has one entry
        per structure, to be summed. At zero offset only the log partial
        sill has a nonzero derivative (the partial sill itself). The
        nugget, whose derivative is ``nugget * I``, is left to the caller.
        The smoothness derivative is a one-sided difference in ``log nu``
        (step :data:`SMOOTHNESS_STEP`), since the derivative of the Bessel
        function ``K_nu`` with respect to its order has no closed form; the
        other derivatives are analytic
        (:meth:`.covariance.Structure.gradients_from_offsets`).
    """
    covariance = np.zeros_like(dx)
    derivatives: list[tuple[int, np.ndarray, float]] = []
    for k, structure in enumerate(model.structures, start=1):
        gradients = structure.gradients_from_offsets(dx, dy, layout.anisotropy)
        covariance += gradients["log_partial_sill"]
        derivatives.append((layout.index(f"log_partial_sill_{k}"), gradients["log_partial_sill"],
                            structure.partial_sill))
        derivatives.append((layout.index(f"log_range_{k}"), gradients["log_range"], 0.0))
        if layout.anisotropy:
            derivatives.append((layout.index("log_ratio"), gradients["log_ratio"], 0.0))
            derivatives.append((layout.index("azimuth"), gradients["azimuth"], 0.0))
    if layout.fits_smoothness:
        derivatives.append((layout.index("log_smoothness"), _smoothness_derivative(model, dx, dy, covariance), 0.0))
    return covariance, derivatives


def _smoothness_derivative(model: CovarianceModel, dx: np.ndarray, dy: np.ndarray,
                           covariance: np.ndarray) -> np.ndarray:
    """One-sided difference of the covariance in ``log nu``, stepping away from the nearer bound.

    ``covariance`` is the model's covariance at the offsets, so only one more
    Bessel-function evaluation is needed. With the step of 1e-6 the
    truncation error is about 1e-6 relative and the rounding error (Bessel
    functions to about 1e-14) about 1e-8.
    """
    nu = model.structures[0].smoothness
    step = SMOOTHNESS_STEP if nu * math.exp(SMOOTHNESS_STEP) <= SMOOTHNESS_BOUNDS[1] else -SMOOTHNESS_STEP
    shifted = CovarianceModel(tuple(replace(s, smoothness=nu * math.exp(step)) for s in model.structures), 0.0)
    return (shifted.covariance_from_offsets(dx, dy) - covariance) / step
