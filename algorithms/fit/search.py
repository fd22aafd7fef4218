"""The likelihood search behind :func:`.fitting.fit_model`: starts, L-BFGS-B runs and warm starts.

The search works on a :class:`SearchProblem`: coordinates centred on the
bounding box and divided by its diagonal, values minus any known mean
divided by the root-mean-square residual of the least-squares (OLS) trend.
In these units the variance is about 1 and the data diameter about 1,
which keeps the optimiser well conditioned; the fitter converts back.

Starts, per family:

1. isotropic: reach (effective range; spherical: its support) 0.03, 0.06,
   0.12, 0.25, 0.5 or 1 times the diameter, nugget 2, 20 or 50 % of the
   variance (Matérn with free smoothness: ``nu = 1``);
2. anisotropic: the best isotropic fit with ratio 0.3 or 0.6, geometric-mean
   range 0.5, 1 or 2 times the isotropic one, and azimuth 0, 45, 90 or 135
   degrees, because the likelihood can have one mode per direction; if the
   isotropic fit (ratio 1) is better, it is kept;
3. nested: from the best single-structure fit, a short structure at 0.3
   (or 1) times its range and a long one at 2 (or 4) times, half the
   partial sill each.

The starts of a stage are screened by the log-likelihood alone, at the
best common scale of their variances (one Cholesky factor each, see
:meth:`.likelihood.LikelihoodObjective.best_scale`), and L-BFGS-B, with
the analytic gradient, runs from the best :data:`STARTS_KEPT` (three): the
likelihood can have several modes (on Meuse log zinc the anisotropic
spherical fit has about ten, its compact support makes the likelihood
kinked), and the best optimum is kept.

With more than :data:`WARM_START_THRESHOLD` samples the stages run on
a random subset of :data:`WARM_START_SIZE` samples (fixed seed) and each
result is refined on all samples from there: the subset finds the right
basin at a fraction of the cost, and Newton steps with the average
information (Gilmour, Thompson & Cullis 1995) followed by an L-BFGS-B
polish fix the estimate on all samples in a few evaluations.
"""
from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import Protocol

import numpy as np
from scipy.spatial import ConvexHull, QhullError, cKDTree

from ..errors import FieldcastError
from ..model.correlation import reach_factor
from ..model.covariance import CovarianceModel
from ..model.parameters import DataScales, ParameterLayout, parameter_bounds
from .likelihood import LikelihoodObjective, MeanBasis
from .minimiser import clamped, convergence_warning, minimise

ISOTROPIC_START_RANGES = (0.03, 0.06, 0.12, 0.25, 0.5, 1.0)
"""Starting effective ranges of isotropic fits, as fractions of the data diameter."""

NUGGET_START_SHARES = (0.02, 0.2, 0.5)
"""Starting nugget shares of the variance of isotropic fits."""

AZIMUTH_STARTS = (0.0, 45.0, 90.0, 135.0)
"""Starting azimuths (degrees) of anisotropic fits."""

RATIO_STARTS = (0.3, 0.6)
"""Starting minor/major range ratios of anisotropic fits."""

RANGE_FACTOR_STARTS = (0.5, 1.0, 2.0)
"""Starting geometric-mean ranges of anisotropic fits, as multiples of the isotropic range."""

NESTED_STARTS = ((0.3, 2.0), (1.0, 4.0))
"""Short and long starting ranges of nested fits, as multiples of the single-structure range."""

LOG_LIKELIHOOD_TOLERANCE = 1e-7
"""L-BFGS-B stops when an iteration gains less than about this much log-likelihood."""

GRADIENT_TOLERANCE = 1e-4
"""... or when no log-likelihood derivative (per log-parameter) exceeds this."""

MAX_ITERATIONS = 500
"""Default L-BFGS-B iteration limit of one optimiser run (:attr:`.options.FitOptions.max_iterations`)."""

NEWTON_ITERATIONS = 10
"""Most average-information Newton steps in the refinement on all samples."""

NEWTON_LONGEST_STEP = 2.0
"""Longest Newton step in log-parameter units (a factor e^2)."""

STARTS_KEPT = 3
"""Starts of a stage that are optimised (those with the highest likelihood)."""

WARM_START_THRESHOLD = 600
"""Sample count above which the search runs on a subset first."""

WARM_START_SIZE = 400
"""Size of that subset."""


def smallest_spacing(xy: np.ndarray) -> float:
    """Smallest nonzero distance between two points, by a k-d tree (``O(n log n)``)."""
    distinct = np.unique(xy, axis=0)
    spacing, _ = cKDTree(distinct).query(distinct, k=2)
    return float(spacing[:, 1].min())


def diameter(xy: np.ndarray) -> float:
    """Largest distance between two points, over the vertices of their convex hull."""
    try:
        corners = xy[ConvexHull(xy).vertices]
    except QhullError:  # collinear points: the ends of their bounding box span them
        corners = np.array([xy.min(axis=0), xy.max(axis=0)])
    return float(np.max(np.hypot(*(corners[:, None, :] - corners[None, :, :]).T)))


class InformationObjective(Protocol):
    """What :func:`newton_steps` needs: ``-2 l``, and with its gradient an information matrix (its expected or
    average Hessian)."""

    def value(self, theta: np.ndarray) -> float: ...

    def value_gradient_information(self, theta: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]: ...


@dataclass(frozen=True)
class SearchProblem:
    """Standardised data shared by every candidate fit.

    Attributes
    ----------
    xy : ndarray of shape (n, 2)
        Centred coordinates divided by ``length_scale``.
    y : ndarray of shape (n,)
        Values minus any known mean, divided by ``value_scale``.
    design : ndarray of shape (n, p)
        Mean design matrix (:meth:`.mean.MeanModel.design`).
    basis : MeanBasis
        Its orthonormal basis.
    method : {"reml", "ml"}
    length_scale, value_scale : float
        CRS units and value units per internal unit.
    internal_scales : DataScales
        Smallest spacing, diameter and variance in internal units (bounds).
    should_stop : callable or None
    max_iterations : int
        L-BFGS-B iteration limit of each optimiser run.
    nugget : float or None
        Nugget held fixed, internal units (divided by ``value_scale`` squared); None fits it.
    error_variance : ndarray of shape (n,) or None
        Per-sample measurement-error variances, internal units, on the diagonal beside the nugget.
    """

    xy: np.ndarray
    y: np.ndarray
    design: np.ndarray
    basis: MeanBasis
    method: str
    length_scale: float
    value_scale: float
    internal_scales: DataScales
    should_stop: Callable[[], bool] | None
    max_iterations: int = MAX_ITERATIONS
    nugget: float | None = None
    error_variance: np.ndarray | None = None

    @classmethod
    def standardise(cls, xy: np.ndarray, y: np.ndarray, design: np.ndarray, method: str,
                    should_stop: Callable[[], bool] | None, max_iterations: int = MAX_ITERATIONS,
                    nugget: float | None = None, error_variance: np.ndarray | None = None) -> SearchProblem:
        """Centre and scale the coordinates, standardise the values, and measure the data.

        ``nugget`` (a fixed nugget) and ``error_variance`` (per-sample variances) are in value units squared.
        """
        basis = MeanBasis.from_design(design)
        value_scale = float(basis.residual_rms(y))
        if not value_scale > 0:
            raise FieldcastError("The mean model reproduces the values exactly, leaving nothing for a "
                                 "covariance model; choose a simpler TREND, or add samples.")
        low, high = xy.min(axis=0), xy.max(axis=0)
        length_scale = float(np.hypot(*(high - low)))
        if not length_scale > 0:
            raise FieldcastError("All samples are at the same location; a covariance model needs samples at "
                                 "different places.")
        internal_xy = (xy - (low + high) / 2.0) / length_scale
        scales = DataScales(smallest_spacing(internal_xy), diameter(internal_xy), 1.0)
        square = value_scale ** 2
        return cls(internal_xy, y / value_scale, design, basis, method, length_scale, value_scale, scales,
                   should_stop, max_iterations, None if nugget is None else nugget / square,
                   None if error_variance is None else np.asarray(error_variance, dtype=float) / square)

    @property
    def contrasts(self) -> int:
        """``n - p`` for REML, ``n`` for ML: the ``m`` in ``m log(s^2)`` and in BIC."""
        return self.basis.contrasts(self.method)

    def subset(self, size: int, seed: int = 0) -> SearchProblem:
        """The same problem on a random subset of the samples (bounds unchanged)."""
        keep = np.sort(np.random.default_rng(seed).choice(len(self.y), size, replace=False))
        design = self.design[keep]
        error_variance = None if self.error_variance is None else self.error_variance[keep]
        return replace(self, xy=self.xy[keep], y=self.y[keep], design=design, basis=MeanBasis.from_design(design),
                       error_variance=error_variance)

    def log_likelihood(self, minus_two_internal: float) -> float:
        """Log-likelihood of the data in their own units from an internal ``-2 l``.

        Scaling the values by ``s`` adds ``m log(s^2)`` to ``-2 l`` (``m`` from
        :attr:`contrasts`); scaling the coordinates changes nothing.
        """
        return -0.5 * (minus_two_internal + self.contrasts * math.log(self.value_scale ** 2))

    @property
    def data_scales(self) -> DataScales:
        """The internal scales in data units."""
        s = self.internal_scales
        return DataScales(s.smallest_spacing * self.length_scale, s.diameter * self.length_scale,
                          s.variance * self.value_scale ** 2)

    def to_data_units(self, model: CovarianceModel) -> CovarianceModel:
        """Ranges times the length scale, variances times the value scale squared."""
        stretched = tuple(replace(s, range=s.range * self.length_scale) for s in model.structures)
        return CovarianceModel(stretched, model.nugget).scaled(self.value_scale ** 2)

    def to_internal_units(self, model: CovarianceModel) -> CovarianceModel:
        """Inverse of :meth:`to_data_units`."""
        shrunk = tuple(replace(s, range=s.range / self.length_scale) for s in model.structures)
        return CovarianceModel(shrunk, model.nugget).scaled(self.value_scale ** -2)


@dataclass(frozen=True)
class SearchFit:
    """An optimised parameter vector of one layout, in internal units.

    ``stopped`` is the warning of :func:`convergence_warning` when the optimiser run that gave
    ``theta`` stopped before convergence, None when it converged.
    """

    layout: ParameterLayout
    theta: np.ndarray
    minus_two_log_likelihood: float
    jitter: float
    stopped: str | None = None


class ProgressSteps:
    """Counts optimiser runs and reports the fraction done."""

    def __init__(self, total: int, progress: Callable[[float], None] | None) -> None:
        self.total, self.done, self.progress = max(total, 1), 0, progress

    def advance(self) -> None:
        """One run finished."""
        self.done += 1
        if self.progress is not None:
            self.progress(min(self.done / self.total, 1.0))


def planned_steps(n: int, n_families: int, settings: tuple[bool, ...], nested: bool) -> int:
    """Number of optimiser runs :func:`fit_family` makes (for progress)."""
    per_family = 1 + (1 if True in settings else 0) + (len(settings) if nested else 0)
    if n > WARM_START_THRESHOLD:
        per_family += len(settings)
    return n_families * per_family


def newton_steps(objective: InformationObjective, theta: np.ndarray, bounds: list, *,
                 log_likelihood_tolerance: float = LOG_LIKELIHOOD_TOLERANCE,
                 iterations: int = NEWTON_ITERATIONS) -> tuple[np.ndarray, bool]:
    """Projected Newton steps on ``-2 l`` with an information matrix as Hessian.

    The exact fit gives the average information, the Vecchia fit the expected one (Fisher scoring). A
    parameter on a bound whose gradient pushes outwards is held; a step that does not lower ``-2 l`` is halved (up
    to five times) before the steps stop. Near the optimum this converges in a few evaluations, where L-BFGS-B,
    which learns the curvature as it goes, needs many more. The steps also stop, without trying the next, when it
    would gain less than ``log_likelihood_tolerance`` of log-likelihood by the quadratic model: the Newton
    decrement ``g^T I^-1 g / 2`` of ``-2 l`` below twice the tolerance (Boyd & Vandenberghe 2004, *Convex
    Optimization*, section 9.5.1).

    Returns the parameters and whether the steps converged: a step gained, or would gain, less than
    ``log_likelihood_tolerance`` of log-likelihood, or none could gain (True), rather than the ``iterations``
    running out (False).
    """
    low = np.array([-np.inf if b[0] is None else b[0] for b in bounds])
    high = np.array([np.inf if b[1] is None else b[1] for b in bounds])
    value, gradient, information = objective.value_gradient_information(theta)
    for _ in range(iterations):
        free = ~(((theta <= low) & (gradient > 0)) | ((theta >= high) & (gradient < 0)))
        if not free.any():
            return theta, True
        block = information[np.ix_(free, free)]
        try:
            step = np.zeros_like(theta)
            step[free] = -np.linalg.solve(block + 1e-9 * np.trace(block) * np.eye(len(block)), gradient[free])
        except np.linalg.LinAlgError:
            return theta, True
        if -0.5 * float(gradient @ step) < 2.0 * log_likelihood_tolerance:  # the step's predicted gain in -2 l
            return theta, True
        step *= min(1.0, NEWTON_LONGEST_STEP / max(np.abs(step).max(), 1e-300))
        trial = np.clip(theta + step, low, high)
        trial_value = objective.value_gradient_information(trial)[0]  # kept for the next step if accepted
        for _ in range(5):  # halve a step that does not improve (value only)
            if trial_value < value:
                break
            step /= 2.0
            trial = np.clip(theta + step, low, high)
            trial_value = objective.value(trial)
        if not trial_value < value:
            return theta, True
        gain = value - trial_value
        theta = trial
        if gain < 2.0 * log_likelihood_tolerance:
            return theta, True
        value, gradient, information = objective.value_gradient_information(theta)
    return theta, False


def _optimise(problem: SearchProblem, layout: ParameterLayout, starts: list[np.ndarray],
              steps: ProgressSteps, refine: bool = False) -> SearchFit:
    """Best L-BFGS-B optimum from the :data:`STARTS_KEPT` starts with the highest likelihood.

    ``refine`` (for the refinement after a warm start, one start close to
    the optimum) takes Newton steps before L-BFGS-B.
    """
    objective = LikelihoodObjective(problem.xy, problem.y, problem.basis, problem.method, layout, problem.should_stop,
                                    problem.error_variance)
    bounds = parameter_bounds(layout, problem.internal_scales)
    starts = [clamped(start, bounds) for start in starts]
    if len(starts) > 1:
        starts = _screened(objective, starts, bounds)

    best: SearchFit | None = None
    for start in starts:
        first = newton_steps(objective, start, bounds)[0] if refine else start
        result = minimise(objective.value_and_gradient, first, bounds, samples=len(problem.y),
                          log_likelihood_tolerance=LOG_LIKELIHOOD_TOLERANCE, gradient_tolerance=GRADIENT_TOLERANCE,
                          max_iterations=problem.max_iterations)
        value = objective.value_and_gradient(result.x)[0]
        if best is None or value < best.minus_two_log_likelihood:
            best = SearchFit(layout, result.x, value, objective.jitter, convergence_warning(result))
    steps.advance()
    return best


def _screened(objective: LikelihoodObjective, starts: list[np.ndarray], bounds: list) -> list[np.ndarray]:
    """The :data:`STARTS_KEPT` starts with the highest likelihood, each with its best variance scale."""
    variances = np.array([name.startswith(("log_partial_sill", "log_nugget")) for name in objective.layout.names])
    low = np.array([-np.inf if b[0] is None else b[0] for b in bounds])
    high = np.array([np.inf if b[1] is None else b[1] for b in bounds])
    scored = []
    for start in starts:
        value, log_scale = objective.best_scale(start)
        scored.append((value, np.clip(start + log_scale * variances, low, high)))
    scored.sort(key=lambda pair: pair[0])
    return [start for _, start in scored[:STARTS_KEPT]]


def _vector(layout: ParameterLayout, value: dict[str, float]) -> np.ndarray:
    return np.array([value[name] for name in layout.names])


def _isotropic_starts(layout: ParameterLayout) -> list[np.ndarray]:
    factor = reach_factor(layout.family, 1.0 if layout.fits_smoothness else layout.smoothness)
    return [_vector(layout, {"log_partial_sill_1": math.log(1.0 - share), "log_range_1": math.log(fraction / factor),
                             "log_smoothness": 0.0, "log_nugget": math.log(share)})
            for fraction in ISOTROPIC_START_RANGES for share in NUGGET_START_SHARES]


def _anisotropic_starts(isotropic: SearchFit, layout: ParameterLayout) -> list[np.ndarray]:
    base = dict(zip(isotropic.layout.names, isotropic.theta))
    log_range = base["log_range_1"]
    return [_vector(layout, {**base, "log_range_1": log_range + math.log(factor) - 0.5 * math.log(ratio),
                             "log_ratio": math.log(ratio), "azimuth": math.radians(azimuth)})
            for azimuth in AZIMUTH_STARTS for ratio in RATIO_STARTS for factor in RANGE_FACTOR_STARTS]


def _as_isotropic(isotropic: SearchFit, layout: ParameterLayout) -> SearchFit:
    """An isotropic fit expressed in the anisotropic layout (ratio 1, azimuth 0)."""
    value = {**dict(zip(isotropic.layout.names, isotropic.theta)), "log_ratio": 0.0, "azimuth": 0.0}
    return replace(isotropic, layout=layout, theta=_vector(layout, value))


def _nested_starts(single: SearchFit, layout: ParameterLayout) -> list[np.ndarray]:
    base = dict(zip(single.layout.names, single.theta))
    half_sill = base.pop("log_partial_sill_1") + math.log(0.5)
    log_range = base.pop("log_range_1")
    return [_vector(layout, {**base, "log_partial_sill_1": half_sill, "log_partial_sill_2": half_sill,
                             "log_range_1": log_range + math.log(short), "log_range_2": log_range + math.log(long)})
            for short, long in NESTED_STARTS]


def _short_range_first(fit: SearchFit) -> SearchFit:
    """A nested fit with its structures ordered by range (short first)."""
    model = fit.layout.unpack(fit.theta)
    ordered = CovarianceModel(tuple(sorted(model.structures, key=lambda s: s.range)), model.nugget)
    theta = fit.layout.pack(ordered)
    if fit.layout.anisotropy:
        theta[fit.layout.index("azimuth")] = fit.theta[fit.layout.index("azimuth")]
    return replace(fit, theta=theta)


def _search_stages(problem: SearchProblem, family: str, smoothness: float | None, settings: tuple[bool, ...],
                   nested: bool, steps: ProgressSteps) -> list[SearchFit]:
    """Isotropic, then anisotropic, then nested fits; one result per anisotropy setting."""
    nugget = problem.nugget
    isotropic_layout = ParameterLayout(family, 1, False, smoothness, nugget)
    isotropic = _optimise(problem, isotropic_layout, _isotropic_starts(isotropic_layout), steps)
    fits = []
    for anisotropy in settings:
        single = isotropic
        if anisotropy:
            layout = ParameterLayout(family, 1, True, smoothness, nugget)
            single = _optimise(problem, layout, _anisotropic_starts(isotropic, layout), steps)
            if isotropic.minus_two_log_likelihood < single.minus_two_log_likelihood:
                single = _as_isotropic(isotropic, layout)
        if nested:
            layout = ParameterLayout(family, 2, anisotropy, smoothness, nugget)
            single = _short_range_first(_optimise(problem, layout, _nested_starts(single, layout), steps))
        fits.append(single)
    return fits


def fit_family(problem: SearchProblem, family: str, smoothness: float | None, settings: tuple[bool, ...],
               nested: bool, steps: ProgressSteps) -> list[SearchFit]:
    """Maximum-likelihood fits of one family, one per anisotropy setting (in order).

    Parameters
    ----------
    problem : SearchProblem
    family : str
    smoothness : float or None
        Fixed Matérn ``nu`` (family "matern"); None fits it.
    settings : tuple of bool
        Anisotropy off/on for each fit wanted.
    nested : bool
        Two structures per fit.
    steps : ProgressSteps
    """
    if len(problem.y) <= WARM_START_THRESHOLD:
        return _search_stages(problem, family, smoothness, settings, nested, steps)
    rough = _search_stages(problem.subset(WARM_START_SIZE), family, smoothness, settings, nested, steps)
    refined = [_optimise(problem, fit.layout, [fit.theta], steps, refine=True) for fit in rough]
    return [_short_range_first(fit) if nested else fit for fit in refined]
