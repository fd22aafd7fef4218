"""Vecchia's nearest-neighbour approximation of the Gaussian log-likelihood (REML or ML).

The exact likelihood factorises as ``p(y) = prod_i p(y_i | y_1, ..., y_{i-1})``
for any ordering of the samples. Vecchia (1988, *J. R. Stat. Soc. B* 50(2),
297-312) conditions each ``y_i`` on its ``m`` nearest *previous* samples
``N(i)`` only; the product is then the exact density of a Gaussian vector
with covariance ``K~`` whose precision is sparse, ``K~^-1 = B^T D^-1 B``
(Datta, Banerjee, Finley & Gelfand 2016, *JASA* 111(514), 800-812)::

    b_i = K_N^-1 c_i,    d_i = C(0) + nugget - c_i^T b_i,
    (B y)_i = y_i - b_i^T y_N(i),
    -2 l = sum_i [ log(2 pi) + log d_i + (B y)_i^2 / d_i ]

with ``K_N`` the covariance (nugget on the diagonal) of the samples in
``N(i)`` and ``c_i`` their covariance with sample ``i``. Conditioning on all
previous samples (``m >= n - 1``) gives the exact likelihood.

Mean. With the design ``F = Q R`` (orthonormal ``Q``, as in
:mod:`.likelihood`), the whitened data ``y~ = D^-1/2 B y`` and design
``Q~ = D^-1/2 B Q``, the mean is profiled by generalised least squares,
``beta = (Q~^T Q~)^-1 Q~^T y~``, and the exact formulas of :mod:`.likelihood`
are applied to ``K~`` (same constant convention)::

    ML:   -2 l   = n log(2 pi) + sum log d_i + |y~ - Q~ beta|^2
    REML: -2 l_R = (n - p) log(2 pi) + sum log d_i + log|Q~^T Q~| + 2 log|det R|
                   + |y~ - Q~ beta|^2

i.e. REML is the restricted likelihood of the Gaussian model with covariance
``K~`` (``log|K~| = sum log d_i``, ``F^T K~^-1 F = R^T Q~^T Q~ R``).

Ordering and conditioning sets: :mod:`.vecchia_order` (exact maximin
ordering, Guinness 2018; each sample's nearest earlier samples).

Gradient (analytic). For a parameter ``t``, with ``rho_i = (B z)_i`` the
residual of ``z = y - Q beta``, ``G_i = (B Q)_i`` and ``A = Q~^T Q~``::

    d(-2l)/dt = sum_i g_i^T db_i/dt + h_i dd_i/dt
    h_i = 1/d_i - rho_i^2/d_i^2 - [REML] G_i^T A^-1 G_i / d_i^2
    g_i = -2 rho_i z_N(i) / d_i  - [REML] 2 Q_N(i) A^-1 G_i / d_i
    db_i = K_N^-1 r_i,  r_i = dc_i - dK_N b_i,   dd_i = dC(0) - 2 dc_i^T b_i + b_i^T dK_N b_i

(``beta`` is profiled, so its own derivative drops out). With ``e_i = (b_i, -1)``
and ``dS_i`` the derivative of the joint covariance of ``(N(i), i)``,
``dS_i e_i = (-r_i, dc_i^T b_i - dC(0))`` and ``dd_i = e_i^T dS_i e_i``; and
``g_i^T db_i = (K_N^-1 g_i)^T r_i`` needs only ``(K_N^-1 y_N)^T r_i`` and
``(K_N^-1 Q_N)^T r_i``, which do not depend on ``beta``. So one pass over the
samples, beside the value's, keeps these few numbers per sample and
parameter, and the gradient is summed once ``beta`` is known. The covariance
derivatives come from :func:`.parameters.covariance_derivatives`, which
also gives the covariance itself.

Information (Guinness 2021, *Stat. Comput.* 31:25, section 3). ``y_i`` given
``y_N(i)`` is normal with mean ``b_i^T y_N(i)`` and variance ``d_i``; the
expected product of the scores of that conditional, with ``y_N(i)`` of
covariance ``K_N``, summed over the samples, is the expected Hessian of
``-2 l``::

    I_jk = sum_i 2 db_ij^T K_N db_ik / d_i + dd_ij dd_ik / d_i^2
         = sum_i 2 (L^-1 r_ij)^T (L^-1 r_ik) / d_i + dd_ij dd_ik / d_i^2   (K_N = L L^T)

With all previous samples as neighbours it is twice the Fisher information
``1/2 tr(K^-1 dK_j K^-1 dK_k)`` of the covariance parameters (Harville 1977,
*JASA* 72, 320-338; the mean's block is zero). The same matrix serves the
REML fit: the restricted information ``1/2 tr(P dK_j P dK_k)`` differs from it
by terms in the ``p`` trend columns, small beside the ``n`` of the sum.
"""
from __future__ import annotations

from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
from scipy import linalg

from ..errors import Cancelled, FieldcastError
from ..io.samples import check_samples
from ..linalg.batched import WORKERS, back_substitution, cholesky_stack, forward_substitution
from ..linalg.blas_threads import single_blas_thread
from ..linalg.condition_policy import FIT_CONDITION_ADVICE, checked_cholesky
from ..model.covariance import CovarianceModel, Structure, search_frame
from ..model.mean import MeanModel
from ..model.parameters import ParameterLayout, covariance_derivatives
from .likelihood import LIKELIHOOD_METHODS, LOG_2PI, OVERFLOW_REMEDY, TREND_WHAT, MeanBasis, check_finite_terms
from .vecchia_order import maximin_order, previous_neighbours

DEFAULT_NEIGHBOURS = 30
"""Conditioning-set size ``m``: from the measured accuracy/time curve of tools/vecchia_neighbours_curve.py
(DEVELOPERS.md): at 30 the two-scale gap case loses under 1 of log-likelihood at 2,000 samples, and going to 40 or
50 costs 1.5-2.5 times the evaluation time for under 0.6 more."""

ROWS_PER_PASS = 2048
"""Samples whose conditional systems are built and solved at once (bounds temporary memory)."""


@dataclass(frozen=True)
class VecchiaPlan:
    """Ordering and conditioning sets of a Vecchia approximation.

    Attributes
    ----------
    order : ndarray of shape (n,)
        ``order[i]`` is the sample placed ``i``-th.
    neighbours : ndarray of int, shape (n, m)
        Positions in the ordering of the conditioning samples of position ``i``.
    valid : ndarray of bool, shape (n, m)
        Which entries of ``neighbours`` exist.
    """

    order: np.ndarray
    neighbours: np.ndarray
    valid: np.ndarray

    @classmethod
    def build(cls, xy: np.ndarray, neighbours: int, structure: Structure | None = None) -> VecchiaPlan:
        """Order the samples and find each one's ``neighbours`` nearest predecessors.

        Distances are measured in the anisotropy frame of ``structure``
        (Euclidean when None). ``neighbours`` is capped at ``n - 1``.
        """
        if int(neighbours) != neighbours or neighbours < 1:
            raise FieldcastError(f"The Vecchia neighbour count must be a whole number >= 1; got {neighbours!r}.")
        frame = np.asarray(xy, dtype=float) if structure is None else search_frame(structure, np.asarray(xy, float))
        order = maximin_order(frame)
        index, valid = previous_neighbours(frame[order], min(int(neighbours), len(frame) - 1))
        return cls(order, index, valid)

    @property
    def size(self) -> int:
        """Largest conditioning-set size ``m``."""
        return self.neighbours.shape[1]

    def nearest(self, neighbours: int) -> VecchiaPlan:
        """The same ordering with each set cut to its ``neighbours`` nearest (the sets are kept nearest first), as
        :meth:`build` with that count gives them (up to ties in distance); at most :attr:`size`."""
        if neighbours >= self.size:
            return self
        return VecchiaPlan(self.order, np.ascontiguousarray(self.neighbours[:, :neighbours]),
                           np.ascontiguousarray(self.valid[:, :neighbours]))


@dataclass(frozen=True)
class VecchiaTerms:
    """One evaluation: ``-2 l``, GLS coefficients for the columns of ``Q``, optional gradient and information (the
    expected Hessian of ``-2 l``, see the module docstring)."""

    minus_two_log_likelihood: float
    basis_coefficients: np.ndarray
    gradient: np.ndarray | None
    information: np.ndarray | None = None


class VecchiaData:
    """Samples in Vecchia order with their conditioning sets, ready for repeated evaluations.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations (any fixed frame).
    y : ndarray of shape (n,)
        Observations minus any known mean.
    basis : MeanBasis
        Orthonormal basis of the design, rows in the original sample order.
    method : {"reml", "ml"}
    plan : VecchiaPlan
    error_variance : ndarray of shape (n,), optional
        Per-sample measurement-error variances (the units of ``y``, squared), added to the diagonal of every
        joint set beside the nugget; their derivative by every parameter is 0.
    """

    def __init__(self, xy: np.ndarray, y: np.ndarray, basis: MeanBasis, method: str, plan: VecchiaPlan,
                 error_variance: np.ndarray | None = None) -> None:
        if method not in LIKELIHOOD_METHODS:
            raise FieldcastError(f"Unknown likelihood {method!r}; choose one of {', '.join(LIKELIHOOD_METHODS)}.")
        self.xy = np.asarray(xy, dtype=float)[plan.order]
        self.y = np.asarray(y, dtype=float)[plan.order]
        self.q = basis.q[plan.order]
        self.error_variance = None if error_variance is None else np.asarray(error_variance, dtype=float)[plan.order]
        self.basis = basis
        self.method = method
        self.plan = plan
        self._triangle = np.tril_indices(plan.size + 1)

    def _offsets(self, rows: slice) -> tuple[np.ndarray, np.ndarray]:
        """Offsets of the pairs (one triangle, diagonal included) of each joint set ``(N(i), i)``: (c, P)."""
        joint = np.concatenate([self.xy[self.plan.neighbours[rows]], self.xy[rows, None, :]], axis=1)
        first, second = self._triangle
        return joint[:, first, 0] - joint[:, second, 0], joint[:, first, 1] - joint[:, second, 1]

    def _joint_error_variance(self, rows: slice, valid: np.ndarray) -> np.ndarray | float:
        """The error variances of each joint set ``(N(i), i)``, (c, m + 1); 0 without them (missing neighbours 0)."""
        if self.error_variance is None:
            return 0.0
        neighbours = np.where(valid, self.error_variance[np.where(valid, self.plan.neighbours[rows], 0)], 0.0)
        return np.concatenate([neighbours, self.error_variance[rows, None]], axis=1)

    def _conditionals(self, model: CovarianceModel, rows: slice, layout: ParameterLayout | None = None,
                      information: bool = False) -> dict[str, np.ndarray]:
        """``b_i``, ``d_i``, ``(B y)_i``, ``(B Q)_i`` and ``K_N^-1 [y_N, Q_N]`` for the rows; with a ``layout`` also
        the per-sample derivative pieces ``dd_i``, ``y_N^T db_i`` and ``Q_N^T db_i`` of every parameter, and with
        ``information`` the rows' share of the information matrix."""
        m = self.plan.size
        first, second = self._triangle
        valid = self.plan.valid[rows]
        joint = np.empty((len(valid), m + 1, m + 1))
        offsets = self._offsets(rows)
        if layout is None:
            pairs, derivatives = model.covariance_from_offsets(*offsets), []
        else:
            pairs, derivatives = covariance_derivatives(layout, model, *offsets)
        joint[:, first, second] = pairs
        joint[:, second, first] = pairs
        joint[:, np.arange(m + 1), np.arange(m + 1)] += model.nugget + self._joint_error_variance(rows, valid)
        joint_valid = np.concatenate([valid, np.ones((len(valid), 1), dtype=bool)], axis=1)
        pair_valid = joint_valid[:, :, None] & joint_valid[:, None, :]
        joint = np.where(pair_valid, joint, np.eye(m + 1))  # a missing neighbour is decoupled
        neighbour_y = np.where(valid, self.y[self.plan.neighbours[rows]], 0.0)
        neighbour_q = np.where(valid[:, :, None], self.q[self.plan.neighbours[rows]], 0.0)
        right = np.concatenate([joint[:, :m, m:], neighbour_y[:, :, None], neighbour_q], axis=2)
        factors, positive = cholesky_stack(joint[:, :m, :m])
        if not positive.all():
            raise FieldcastError(
                "A conditioning set of the Vecchia likelihood has a singular covariance: samples at (nearly) the "
                "same location and no nugget. " + FIT_CONDITION_ADVICE
            )
        white = forward_substitution(factors, right)  # L^-1 [c, y_N, Q_N] with K_N = L L^T
        solved = back_substitution(factors, white)  # K_N^-1 [c, y_N, Q_N]
        b = solved[:, :, 0]
        part = {
            "b": b,
            "d": joint[:, m, m] - np.einsum("cj,cj->c", white[:, :, 0], white[:, :, 0]),
            "u": self.y[rows] - np.einsum("cj,cj->c", b, neighbour_y),
            "G": self.q[rows] - np.einsum("cj,cjp->cp", b, neighbour_q),
            "solved_y": solved[:, :, 1],
            "solved_q": solved[:, :, 2:],
        }
        if layout is not None:
            part.update(self._derivative_pieces(layout, model, rows, derivatives, part,
                                                factors if information else None))
        return part

    def _derivative_pieces(self, layout: ParameterLayout, model: CovarianceModel, rows: slice,
                           derivatives: list[tuple[int, np.ndarray, float]], part: dict[str, np.ndarray],
                           factors: np.ndarray | None) -> dict[str, np.ndarray]:
        """``dd_i`` (c, P), ``y_N^T db_i`` (c, P) and ``Q_N^T db_i`` (c, P, p) of every parameter; with the Cholesky
        ``factors`` of the ``K_N``, also the rows' share of the information,
        ``sum_i 2 db_i^T K_N db_i / d_i + dd_i dd_i^T / d_i^2`` with ``db_j^T K_N db_k = (L^-1 r_j)^T (L^-1 r_k)``.

        With ``e_i = (b_i, -1)``: ``dK e_i = (-r_i, dc_i^T b_i - dC(0))`` with ``r_i = dc_i - dK_N b_i``, so
        ``dd_i = e_i^T dK e_i`` and ``x^T db_i = (K_N^-1 x)^T r_i`` (``dK``: the derivative of the joint set's
        covariance, given as one triangle of its pairs; 0 in ``r_i`` for a missing neighbour).
        """
        m = self.plan.size
        first, second = self._triangle
        b = part["b"]
        e = np.concatenate([b, -np.ones((len(b), 1))], axis=1)
        product = np.zeros((len(b), layout.n_parameters, m + 1))
        derivative_matrix = np.empty((len(b), m + 1, m + 1))
        for index, derivative, _ in derivatives:
            derivative_matrix[:, first, second] = derivative
            derivative_matrix[:, second, first] = derivative
            product[:, index] += np.einsum("cab,cb->ca", derivative_matrix, e)
        if layout.nugget is None:  # dK = nugget I on the joint set
            product[:, layout.index("log_nugget")] = model.nugget * e
        r = np.where(self.plan.valid[rows, None, :], -product[:, :, :m], 0.0)
        pieces = {"dd": np.einsum("cka,ca->ck", product, e), "yr": np.einsum("ckj,cj->ck", r, part["solved_y"]),
                  "qr": r @ part["solved_q"]}
        if factors is not None:
            white_r = forward_substitution(factors, np.swapaxes(r, 1, 2)) / np.sqrt(part["d"])[:, None, None]
            white_r = white_r.reshape(-1, layout.n_parameters)  # rows: (sample, neighbour) pairs
            scaled_dd = pieces["dd"] / part["d"][:, None]
            pieces["information"] = 2.0 * white_r.T @ white_r + scaled_dd.T @ scaled_dd
        return pieces

    def regression(self, model: CovarianceModel) -> tuple[np.ndarray, np.ndarray]:
        """The regression coefficients ``b_i`` (rows, over ``plan.neighbours``; 0 where missing) and the conditional
        variances ``d_i`` of every position of the ordering: ``K~^-1 = B^T D^-1 B``."""
        n = len(self.y)
        parts = [self._conditionals(model, slice(start, min(start + ROWS_PER_PASS, n)))
                 for start in range(0, n, ROWS_PER_PASS)]
        return np.concatenate([part["b"] for part in parts]), np.concatenate([part["d"] for part in parts])

    def evaluate(self, model: CovarianceModel, layout: ParameterLayout | None = None,
                 should_stop: Callable[[], bool] | None = None, information: bool = False) -> VecchiaTerms:
        """``-2 l`` of ``model`` and, when a layout is given, its gradient in that layout's parameters (and with
        ``information`` the information matrix of the module docstring)."""
        n, p = self.q.shape
        def one_pass(start: int) -> dict[str, np.ndarray]:
            if should_stop is not None and should_stop():
                raise Cancelled("The likelihood evaluation was cancelled.")
            return self._conditionals(model, slice(start, min(start + ROWS_PER_PASS, n)), layout, information)

        with single_blas_thread(), ThreadPoolExecutor(WORKERS) as pool:
            parts = list(pool.map(one_pass, range(0, n, ROWS_PER_PASS)))
        joined = {key: np.concatenate([part[key] for part in parts]) for key in parts[0]
                  if key not in ("b", "information")}
        d = joined["d"]
        if not np.all(d > 0):
            raise FieldcastError(
                "The Vecchia likelihood met a conditional variance <= 0: the covariance model is numerically "
                "singular at these samples. " + FIT_CONDITION_ADVICE
            )
        root = np.sqrt(d)
        white_y = joined["u"] / root
        white_q = joined["G"] / root[:, None]
        value = float(np.sum(np.log(d)))
        beta = np.zeros(0)
        if p:
            gram = checked_cholesky(white_q.T @ white_q, TREND_WHAT, OVERFLOW_REMEDY)
            beta = linalg.cho_solve(gram, white_q.T @ white_y, check_finite=False)
            if self.method == "reml":
                value += 2.0 * float(np.sum(np.log(np.diag(gram[0])))) + self.basis.log_det_r_squared
        residual = white_y - white_q @ beta
        value += float(residual @ residual) + self.basis.contrasts(self.method) * LOG_2PI
        check_finite_terms(value, beta)
        if layout is None:
            return VecchiaTerms(value, beta, None)
        rho_over_d = residual / root
        # d(-2l)/dt = sum_i h_i dd_i + (K_N^-1 g_i)^T r_i (module docstring)
        h = 1.0 / d - rho_over_d ** 2
        w_r = -2.0 * rho_over_d[:, None] * (joined["yr"] - joined["qr"] @ beta)
        if p and self.method == "reml":
            trend_weight = linalg.cho_solve(gram, (white_q / root[:, None]).T, check_finite=False).T  # A^-1 G_i/d_i
            h -= np.einsum("cp,cp->c", joined["G"], trend_weight) / d
            w_r -= 2.0 * np.einsum("ckp,cp->ck", joined["qr"], trend_weight)
        gradient = h @ joined["dd"] + w_r.sum(axis=0)
        return VecchiaTerms(value, beta, gradient, sum(part["information"] for part in parts) if information else None)


class VecchiaObjective:
    """``-2 l`` (Vecchia) and its gradient as functions of a :class:`.parameters.ParameterLayout` vector.

    The same interface as :class:`.likelihood.LikelihoodObjective` (``value``,
    ``value_and_gradient``, ``evaluations``, ``jitter``); the conditioning
    sets stay fixed, so the objective is smooth in the parameters.
    """

    def __init__(self, data: VecchiaData, layout: ParameterLayout,
                 should_stop: Callable[[], bool] | None = None) -> None:
        self.data = data
        self.layout = layout
        self.should_stop = should_stop
        self.evaluations = 0
        self.jitter = 0.0
        self._last: tuple[bytes, VecchiaTerms] | None = None

    def value(self, theta: np.ndarray) -> float:
        """``-2 l`` at ``theta``."""
        return self.terms(theta).minus_two_log_likelihood

    def terms(self, theta: np.ndarray) -> VecchiaTerms:
        """The evaluation at ``theta``: the remembered one of :meth:`value_gradient_information` at the same point,
        else the value alone (no gradient)."""
        if self._last is not None and self._last[0] == np.asarray(theta, dtype=float).tobytes():
            return self._last[1]
        self.evaluations += 1
        return self.data.evaluate(self.layout.unpack(theta), None, self.should_stop)

    def value_and_gradient(self, theta: np.ndarray) -> tuple[float, np.ndarray]:
        """``-2 l`` and its gradient with respect to ``theta``."""
        self.evaluations += 1
        terms = self.data.evaluate(self.layout.unpack(theta), self.layout, self.should_stop)
        return terms.minus_two_log_likelihood, terms.gradient

    def value_gradient_information(self, theta: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
        """``-2 l``, its gradient and the Vecchia information matrix (the expected Hessian of ``-2 l``); the last
        point asked is remembered (a Newton step asks for its accepted trial point again)."""
        key = np.asarray(theta, dtype=float).tobytes()
        if self._last is None or self._last[0] != key:
            self.evaluations += 1
            terms = self.data.evaluate(self.layout.unpack(theta), self.layout, self.should_stop, information=True)
            self._last = (key, terms)
        terms = self._last[1]
        return terms.minus_two_log_likelihood, terms.gradient, terms.information


def vecchia_evaluation(xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel, *,
                       neighbours: int = DEFAULT_NEIGHBOURS, method: str = "reml",
                       covariates: np.ndarray | None = None) -> tuple[float, np.ndarray]:
    """Vecchia log-likelihood and GLS coefficients (columns of ``mean.design``); see :func:`vecchia_log_likelihood`."""
    check_samples(xy, values)
    points = np.asarray(xy, dtype=float)
    observed = np.asarray(values, dtype=float)
    basis = MeanBasis.from_design(mean.design(points, covariates))
    plan = VecchiaPlan.build(points, neighbours, covariance.structures[0])
    data = VecchiaData(points, observed - mean.known_mean(len(observed)), basis, method, plan)
    terms = data.evaluate(covariance)
    return -0.5 * terms.minus_two_log_likelihood, basis.coefficients(terms.basis_coefficients)


def vecchia_log_likelihood(xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel, *,
                           neighbours: int = DEFAULT_NEIGHBOURS, method: str = "reml",
                           covariates: np.ndarray | None = None) -> float:
    """Vecchia approximation of :func:`.likelihood.log_likelihood` (same arguments and conventions).

    ``neighbours`` is the conditioning-set size ``m``; ``m >= n - 1`` gives
    the exact value. Conditioning sets are searched in the anisotropy frame
    of the model's first structure. Costs ``O(n m^3)`` time and ``O(n m)``
    memory; returns the natural-log (restricted) likelihood.
    """
    return vecchia_evaluation(xy, values, covariance, mean, neighbours=neighbours, method=method,
                              covariates=covariates)[0]

