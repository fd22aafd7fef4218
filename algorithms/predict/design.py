"""Where to sample next: greedy sequential choice of new sample places among candidates.

Given the samples, the fitted covariance and mean models, evaluation points ``E`` that discretise the region
and candidate places ``C``, each step adds the candidate that lowers the criterion most, then updates the
kriging system by one rank.

Error covariance. With the factors of :meth:`.kriging.KrigingPredictor.error_factors` the covariance of the
kriging errors at two places ``a`` and ``b`` given the samples is
``S(a, b) = C(a, b) - W_a^T W_b + H_a^T H_b`` (u2). The trend term ``H_a^T H_b`` is the universal-kriging
part: it is the covariance of the latent field given the samples when the trend coefficients have a flat
prior, the limit in which universal kriging is Bayesian prediction (Rasmussen & Williams 2006, *Gaussian
Processes for Machine Learning*, section 2.7). A new measurement at ``c`` carries the nugget's error, so
conditioning on it is the rank-one (Schur complement) update::

    S'(a, b) = S(a, b) - S(a, c) S(c, b) / (S(c, c) + nugget)

exact for Gaussian conditioning, and equal to refitting the full kriging system with ``c`` added (the
tests check it so). The design keeps ``S(E, C)`` (n_e, n_c) and the variances ``S(E, E)`` and ``S(C, C)``;
a pick's row ``S(c, C)`` comes from the initial factors and the earlier picks' rank-one terms, in
``O((n + k) n_c)`` for ``n`` samples and ``k`` earlier picks, and the update of ``S(E, C)`` costs
``O(n_e n_c)`` per step.

Criteria (both averaged over the evaluation points):

``variance``
    the mean kriging variance of the latent field, ``mean_e S(e, e)``. It does not depend on the values,
    so the design it gives is exact for the model (not an approximation in the data).
``classification``
    the expected misclassification against a threshold ``t`` (modelling scale), ``mean_e p (1 - p)`` with
    ``p = P(Z(e) > t)``. The values at the new places are unknown: with the current kriging mean ``m`` and
    variance ``s2`` at ``e``, after a design whose variance there is ``s2'`` the future mean is normal
    around ``m`` with variance ``s2 - s2'`` (the preposterior law), and, with ``h = (m - t) / s``,
    ``r = 1 - s2' / s2``::

        E[p (1 - p)] = Phi(h) - Phi2(h, h; r) = 2 T(h, sqrt((1 - r) / (1 + r)))

    using ``E[Phi(a + b X)] = Phi(a / sqrt(1 + b^2))``, ``E[Phi(a + b X)^2] = Phi2(.., ..; b^2 / (1 + b^2))``
    for standard normal ``X``, and Owen's T function (Owen 1956, *Ann. Math. Statist.* 27, 1075-1090;
    ``scipy.special.owens_t``). The design uses the current map: it depends on the kriging means of the
    samples, and is only as good as they are.

    Screening: with more than :data:`SCREENED` free candidates, each step first ranks them by the first-order
    gain ``sum_e dE/dr * dr`` (``dE/dr = -exp(-h^2 / (1 + r)) / (2 pi sqrt(1 - r^2))``, the derivative of
    ``Phi2`` with respect to its correlation) and evaluates the exact criterion for the best :data:`SCREENED`
    only, so the choice is the exact greedy one among those (exactly greedy for smaller candidate sets).
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy import special
from scipy.linalg import blas
from scipy.spatial import cKDTree

from ..errors import Cancelled, FieldcastError
from .kriging import KrigingPredictor, as_points, column_squared_norms

DESIGN_CRITERIA = ("variance", "classification")
"""What a design lowers: the mean kriging variance, or the expected misclassification against a threshold."""

SCREENED = 256
"""Candidates per step whose exact misclassification is computed, the best by the first-order gain."""

PAIR_BUDGET = 50_000_000
"""Most evaluation-point x candidate pairs a design keeps in memory (8 bytes each)."""

_CHUNK = 512
"""Candidates per block when building ``S(E, C)`` and scoring misclassification."""


@dataclass(frozen=True)
class Proposal:
    """A sequence of proposed sample places.

    Attributes
    ----------
    picks : ndarray of int, shape (k,)
        Indices into the candidates, in the order of choice.
    xy : ndarray of shape (k, 2)
        Their coordinates (CRS units).
    criterion : str
        One of :data:`DESIGN_CRITERIA`.
    before : float
        The criterion with the samples only (u2 for variance; a probability for classification).
    after : ndarray of shape (k,)
        The criterion after each addition.
    """

    picks: np.ndarray
    xy: np.ndarray
    criterion: str
    before: float
    after: np.ndarray


def expected_misclassification(h: np.ndarray, reduction: np.ndarray) -> np.ndarray:
    """``E[p (1 - p)]`` after the variance shrinks by the fraction ``reduction`` (see the module notes).

    Parameters
    ----------
    h : ndarray
        ``(m - t) / s`` with the current kriging mean ``m``, standard error ``s`` and threshold ``t``.
    reduction : ndarray
        ``1 - s2' / s2`` in [0, 1], broadcast against ``h``.
    """
    r = np.clip(reduction, 0.0, 1.0)
    return 2.0 * special.owens_t(h, np.sqrt((1.0 - r) / (1.0 + r)))


def propose_samples(predictor: KrigingPredictor, evaluation_xy: np.ndarray, candidate_xy: np.ndarray,
                    count: int, *, criterion: str = "variance", level: float | None = None,
                    min_spacing: float = 0.0, evaluation_covariates: np.ndarray | None = None,
                    candidate_covariates: np.ndarray | None = None,
                    progress: Callable[[float], None] | None = None,
                    should_stop: Callable[[], bool] | None = None) -> Proposal:
    """Choose ``count`` new sample places among the candidates, greedily (see the module notes).

    Parameters
    ----------
    predictor : KrigingPredictor
        Kriging from the current samples (its covariance model's nugget is the new measurements' error).
    evaluation_xy : ndarray of shape (n_e, 2)
        Points that discretise the region the criterion averages over.
    candidate_xy : ndarray of shape (n_c, 2)
        Places where a new sample may go.
    count : int
        Number of places to choose, at least 1.
    criterion : str
        ``"variance"`` or ``"classification"``.
    level : float, optional
        The threshold in the modelling scale (already transformed); needed for classification.
    min_spacing : float
        Least distance of a proposal to every sample and earlier proposal (CRS units).
    evaluation_covariates, candidate_covariates : ndarray, optional
        Covariate columns at the points when the mean model names covariates.
    progress, should_stop : callable, optional
        Called per step with the finished fraction / asked whether to stop (raises :class:`Cancelled`).

    Raises
    ------
    FieldcastError
        For an unknown criterion, classification without a threshold, too many pairs, or fewer usable
        candidates than ``count``.
    """
    evaluation = as_points(evaluation_xy, "Evaluation points")
    candidates = as_points(candidate_xy, "Candidate places")
    state = _DesignState(predictor, evaluation, candidates, evaluation_covariates, candidate_covariates,
                         _checked_settings(criterion, level, count, len(evaluation), len(candidates)), should_stop)
    free = _spaced(candidates, predictor.xy, min_spacing)
    if np.count_nonzero(free) < count:
        _refuse_count(count, int(np.count_nonzero(free)), min_spacing)
    score = state.mean_variance
    if criterion == "classification":
        score = state.misclassification
        mean, _ = predictor.predict(evaluation, evaluation_covariates)
        deviation = np.sqrt(np.clip(state.variance_e, 0.0, None))
        state.h = np.where(deviation > 0, (mean - level) / np.where(deviation > 0, deviation, 1.0),
                           np.where(mean > level, np.inf, -np.inf))
    before = score(state.variance_e)
    picks, after = [], []
    for step in range(int(count)):
        if should_stop is not None and should_stop():
            raise Cancelled("Proposing samples was cancelled.")
        if not free.any():
            _refuse_count(count, step, min_spacing)
        values = state.scores(score, free)
        pick = int(np.flatnonzero(free)[np.argmin(values[free])])
        state.add(pick)
        picks.append(pick)
        after.append(score(state.variance_e))
        free &= _spaced(candidates, candidates[pick:pick + 1], min_spacing)
        free[pick] = False
        if progress is not None:
            progress((step + 1) / count)
    chosen = np.array(picks, dtype=int)
    return Proposal(chosen, candidates[chosen], criterion, float(before), np.array(after))


def _checked_settings(criterion: str, level: float | None, count: int, n_e: int, n_c: int) -> str:
    """``criterion`` when the settings are usable; FieldcastError saying what to change otherwise."""
    if criterion not in DESIGN_CRITERIA:
        raise FieldcastError(f"Unknown criterion {criterion!r}; choose one of {', '.join(DESIGN_CRITERIA)}.")
    if criterion == "classification" and (level is None or not np.isfinite(level)):
        raise FieldcastError("The classification criterion needs a THRESHOLD (attribute units); give one, or "
                             "choose the variance criterion.")
    if int(count) < 1:
        raise FieldcastError(f"COUNT is {count}; ask for at least one new sample.")
    if n_e == 0 or n_c == 0:
        raise FieldcastError("There are no evaluation points or no candidate places inside the region; choose a "
                             "larger REGION or CANDIDATES inside it.")
    if n_e * n_c > PAIR_BUDGET:
        raise FieldcastError(f"{n_c:,} candidate places with {n_e:,} evaluation points are more pairs than a design "
                             f"keeps in memory ({PAIR_BUDGET:,}); give fewer CANDIDATES (e.g. a thinned layer).")
    return criterion


def _refuse_count(count: int, available: int, min_spacing: float) -> None:
    spacing = f" at least MIN_SPACING = {min_spacing:g} apart and from the samples" if min_spacing > 0 else ""
    raise FieldcastError(f"COUNT is {count} but only {available} candidate place(s) can be chosen{spacing}. "
                         "Lower COUNT or MIN_SPACING, or give more CANDIDATES.")


def _spaced(points: np.ndarray, others: np.ndarray, min_spacing: float) -> np.ndarray:
    """Boolean (n,): True for the points at least ``min_spacing`` from every one of ``others``."""
    if min_spacing <= 0 or len(others) == 0:
        return np.ones(len(points), dtype=bool)
    distance, _ = cKDTree(others).query(points, k=1)
    return distance >= min_spacing


class _DesignState:
    """``S(E, C)``, ``S(E, E)``, ``S(C, C)`` and the rank-one terms of the picks so far (see the module notes)."""

    def __init__(self, predictor: KrigingPredictor, evaluation: np.ndarray, candidates: np.ndarray,
                 evaluation_covariates, candidate_covariates, criterion: str, should_stop) -> None:
        covariance = predictor.covariance
        self.nugget = covariance.nugget
        self.candidates = candidates
        self.covariance = covariance
        w_e, h_e = predictor.error_factors(evaluation, evaluation_covariates)
        self.w_c, self.h_c = predictor.error_factors(candidates, candidate_covariates)
        prior = covariance.field_variance
        self.variance_e = prior - column_squared_norms(w_e) + column_squared_norms(h_e)
        self.variance_c = prior - column_squared_norms(self.w_c) + column_squared_norms(self.h_c)
        self.cross = np.empty((len(evaluation), len(candidates)), order="F")
        for start in range(0, len(candidates), _CHUNK):
            if should_stop is not None and should_stop():
                raise Cancelled("Proposing samples was cancelled.")
            stop = start + _CHUNK
            self.cross[:, start:stop] = (covariance.cross_covariance(evaluation, candidates[start:stop])
                                         - w_e.T @ self.w_c[:, start:stop] + h_e.T @ self.h_c[:, start:stop])
        self.norms = column_squared_norms(self.cross)
        self.variance_e0 = self.variance_e.copy()
        self.terms: list[np.ndarray] = []
        self.h: np.ndarray | None = None

    def measurement_variance(self) -> np.ndarray:
        """``S(c, c) + nugget`` per candidate (0 where a new measurement would add nothing)."""
        return np.clip(self.variance_c, 0.0, None) + self.nugget

    def scores(self, score, free: np.ndarray) -> np.ndarray:
        """The criterion after adding each candidate (inf for those not free or adding nothing)."""
        measurement = self.measurement_variance()
        usable = free & (measurement > 0)
        divisor = np.where(usable, measurement, 1.0)
        if self.h is None:  # mean variance: the mean of S(e, e) less the column's sum of squares over S(c, c) + nugget
            values = np.mean(np.clip(self.variance_e, 0.0, None)) - self.norms / (divisor * len(self.variance_e))
            return np.where(usable, values, np.inf)
        values = np.full(len(self.candidates), np.inf)
        columns = np.flatnonzero(usable)
        if len(columns) > SCREENED:
            columns = columns[np.argsort(-self.first_order_gain(divisor)[columns])[:SCREENED]]
        for start in range(0, len(columns), _CHUNK):
            chosen = columns[start:start + _CHUNK]
            shrink = np.square(self.cross[:, chosen]) / divisor[chosen]
            values[chosen] = score(self.variance_e[:, None] - shrink)
        return values

    def first_order_gain(self, divisor: np.ndarray) -> np.ndarray:
        """Per candidate, ``sum_e |dE/dr| * S(e, c)^2 / ((S(c, c) + nugget) s2_e)``: the screening rank."""
        start = self.variance_e0
        reduction = np.clip(1.0 - self.variance_e / np.where(start > 0, start, 1.0), 0.0, 1.0 - 1e-9)
        slope = np.where(start > 0, np.exp(-np.square(self.h) / (1.0 + reduction)) / np.sqrt(1.0 - reduction ** 2)
                         / np.where(start > 0, start, 1.0), 0.0)
        gain = np.empty(len(divisor))
        for first in range(0, len(divisor), _CHUNK):
            gain[first:first + _CHUNK] = slope @ np.square(self.cross[:, first:first + _CHUNK])
        return gain / divisor

    def mean_variance(self, variance: np.ndarray) -> np.ndarray:
        """Mean kriging variance over the evaluation points (axis 0), u2."""
        return np.mean(np.clip(variance, 0.0, None), axis=0)

    def misclassification(self, variance: np.ndarray) -> np.ndarray:
        """Mean expected misclassification ``E[p (1 - p)]`` over the evaluation points (axis 0)."""
        start = self.variance_e0.reshape((-1,) + (1,) * (np.ndim(variance) - 1))
        positive = start > 0
        reduction = np.where(positive, 1.0 - np.clip(variance, 0.0, None) / np.where(positive, start, 1.0), 0.0)
        h = self.h.reshape(start.shape)
        return np.mean(expected_misclassification(h, reduction), axis=0)

    def add(self, pick: int) -> None:
        """Condition on a new measurement at candidate ``pick`` (the rank-one update)."""
        scale = np.sqrt(self.measurement_variance()[pick])
        row = (self.covariance.cross_covariance(self.candidates[pick:pick + 1], self.candidates)[0]
               - self.w_c[:, pick] @ self.w_c + self.h_c[:, pick] @ self.h_c)
        for term in self.terms:
            row -= term[pick] * term
        term_c = row / scale
        term_e = self.cross[:, pick] / scale
        # Column sums of squares of S(E, C) after the update, from those before: (s - a b)^2 summed over e.
        self.norms += np.square(term_c) * float(term_e @ term_e) - 2.0 * term_c * (term_e @ self.cross)
        self.cross = blas.dger(-1.0, term_e, term_c, a=self.cross, overwrite_a=True)  # in place (Fortran order)
        self.variance_e = self.variance_e - np.square(term_e)
        self.variance_c = self.variance_c - np.square(term_c)
        self.terms.append(term_c)
