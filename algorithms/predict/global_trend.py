"""The trend estimated once from all samples, for local kriging of the residuals.

Generalised least squares (Cressie 1993, *Statistics for Spatial Data*, rev.
ed., section 3.4 on universal kriging): with the covariance ``K`` of the
observations (nugget on the diagonal), the design ``F`` (n, p) of the mean
model and the data ``y``::

    beta   = (F^T K^-1 F)^-1 F^T K^-1 y
    V_beta = (F^T K^-1 F)^-1            (covariance of beta, given K)

Up to :data:`EXACT_TREND_LIMIT` samples ``K = L L^T`` is factorised and
``L^-1 [y, F]`` solved. Above it ``K^-1`` is replaced by Vecchia's
approximation ``K~^-1 = B^T D^-1 B`` (Vecchia 1988, *J. R. Stat. Soc. B*
50(2), 297-312; Datta et al. 2016, *JASA* 111(514), 800-812), with the
ordering and conditioning sets of :class:`..fit.vecchia.VecchiaPlan`: each
sample, in that order, is conditioned on its nearest earlier samples ``N(i)``
and ``D^-1/2 B z`` is, per sample,
``(z_i - c_i^T K_N^-1 z_N) / sqrt(d_i)``, ``d_i = C(0) + nugget - c_i^T K_N^-1 c_i``.
The GLS formulas are then applied to the whitened columns (the Gram matrix
``F^T K~^-1 F`` gives ``V_beta``).

Local kriging then krigs ``y - F beta`` by simple kriging from each target's
neighbours (:class:`.local.LocalKrigingPredictor` with ``trend=``), so a
neighbourhood's few samples never re-estimate, and extrapolate, the trend.
"""
from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
from scipy import linalg

from ..errors import FieldcastError
from ..fit.vecchia import DEFAULT_NEIGHBOURS, VecchiaPlan
from ..linalg.batched import WORKERS, cholesky_stack, forward_substitution
from ..linalg.condition_policy import CONDITION_ADVICE
from ..model.covariance import CovarianceModel
from ..model.mean import MeanModel
from .kriging import MORE_SAMPLES_ADVICE, as_points, as_value_columns, cholesky_factor

EXACT_TREND_LIMIT = 5000
"""Most samples whose covariance matrix is factorised for the trend; above it the Vecchia approximation is used."""

WHITEN_ROWS = 4096
"""Samples whose Vecchia conditionals are solved at once (bounds temporary memory)."""

TREND_REMEDY = ("The trend terms cannot be told apart at these samples (points on a line, a constant or duplicated "
                "covariate, or too few samples); refit the model with a simpler TREND, or drop that covariate.")
"""What to change when the trend's Gram matrix is singular."""


@dataclass(frozen=True)
class GlobalTrend:
    """GLS trend coefficients from all samples and their covariance.

    Attributes
    ----------
    coefficients : ndarray of shape (p, m)
        ``beta`` per field, in the order of ``mean.term_names``.
    coefficient_covariance : ndarray of shape (p, p)
        ``V_beta = (F^T K^-1 F)^-1``, shared by the fields (units of coefficient products).
    method : str
        ``"exact"`` (``K`` factorised) or ``"Vecchia"`` (its nearest-neighbour approximation).
    """

    coefficients: np.ndarray
    coefficient_covariance: np.ndarray
    method: str

    @property
    def standard_errors(self) -> np.ndarray:
        """``sqrt(diag(V_beta))``, one per trend term."""
        return np.sqrt(np.diag(self.coefficient_covariance))


def _vecchia_whitened(points: np.ndarray, columns: np.ndarray, covariance: CovarianceModel,
                      neighbours: int, error_variance: np.ndarray | None = None) -> np.ndarray:
    """``D^-1/2 B columns`` (n, c) in the Vecchia order of the points (see module docstring); per-sample error
    variances, when given, join the nugget on the diagonal."""
    plan = VecchiaPlan.build(points, neighbours, covariance.structures[0])
    ordered_xy, ordered = points[plan.order], columns[plan.order]
    own = np.zeros(len(points)) if error_variance is None else np.asarray(error_variance, dtype=float)[plan.order]
    m = plan.size
    whitened = np.empty_like(ordered)

    def whiten(start: int) -> None:
        rows = slice(start, start + WHITEN_ROWS)
        valid = plan.valid[rows]
        near = ordered_xy[plan.neighbours[rows]]  # (r, m, 2)
        within = covariance.covariance_from_offsets(near[:, :, None, 0] - near[:, None, :, 0],
                                                    near[:, :, None, 1] - near[:, None, :, 1])
        within[:, np.arange(m), np.arange(m)] += covariance.nugget + np.where(valid, own[plan.neighbours[rows]], 0.0)
        pairs = valid[:, :, None] & valid[:, None, :]
        within = np.where(pairs, within, np.eye(m))  # a missing neighbour is decoupled
        offsets = ordered_xy[rows, None, :] - near
        cross = np.where(valid, covariance.covariance_from_offsets(offsets[:, :, 0], offsets[:, :, 1]), 0.0)
        factors, positive = cholesky_stack(within)
        if not positive.all():
            raise FieldcastError("The covariance of some nearest samples is singular (samples at the same place "
                                 "and no nugget), so the trend cannot be estimated. " + CONDITION_ADVICE)
        near_columns = np.where(valid[:, :, None], ordered[plan.neighbours[rows]], 0.0)
        white = forward_substitution(factors, np.concatenate([cross[:, :, None], near_columns], axis=2))
        white_cross, white_columns = white[:, :, 0], white[:, :, 1:]
        conditional = covariance.sill + own[rows] - np.einsum("rj,rj->r", white_cross, white_cross)
        if not np.all(conditional > 0):
            raise FieldcastError("A conditional variance of the samples came out <= 0: the covariance model is "
                                 "numerically singular at these samples. " + CONDITION_ADVICE)
        whitened[rows] = ((ordered[rows] - np.einsum("rj,rjc->rc", white_cross, white_columns))
                          / np.sqrt(conditional)[:, None])

    with ThreadPoolExecutor(max_workers=WORKERS) as pool:
        list(pool.map(whiten, range(0, len(ordered), WHITEN_ROWS)))  # list() re-raises a worker's refusal
    return whitened


def estimate_trend(xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel,
                   covariates: np.ndarray | None = None, *, exact_limit: int = EXACT_TREND_LIMIT,
                   vecchia_neighbours: int = DEFAULT_NEIGHBOURS,
                   error_variance: np.ndarray | None = None) -> GlobalTrend:
    """GLS trend of all samples: ``beta`` and ``V_beta`` (module docstring).

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations, CRS units.
    values : ndarray of shape (n,) or (n, m)
        Values in the modelling scale, one column per field.
    covariance, mean : CovarianceModel, MeanModel
        The model; the mean must have estimated terms (not ``known``).
    covariates : ndarray of shape (n, q), optional
        The mean's covariate columns at the samples.
    exact_limit : int
        Most samples solved exactly; more use the Vecchia approximation.
    vecchia_neighbours : int
        Conditioning-set size of the Vecchia approximation.
    error_variance : ndarray of shape (n,), optional
        Per-sample measurement-error variances (modelling units squared), on the diagonal beside the nugget.

    Returns
    -------
    GlobalTrend

    Raises
    ------
    FieldcastError
        With too few samples for the terms, a singular covariance, or trend terms the samples cannot tell apart.
    """
    points = as_points(xy, "Sample coordinates")
    observed = as_value_columns(values, len(points)).reshape(len(points), -1)
    design = mean.design(points, covariates)
    p = design.shape[1]
    if not p or len(points) <= p:
        raise FieldcastError(f"The {mean.kind} mean model has {p} estimated term(s) and there are {len(points)} "
                             "samples. " + MORE_SAMPLES_ADVICE)
    columns = np.concatenate([observed, design], axis=1)
    if len(points) <= exact_limit:
        factor = cholesky_factor(covariance.data_covariance(points, error_variance), "covariance matrix of the samples",
                                 CONDITION_ADVICE)
        whitened = linalg.solve_triangular(factor, columns, lower=True, check_finite=False)
        method = "exact"
    else:
        whitened = _vecchia_whitened(points, columns, covariance, vecchia_neighbours, error_variance)
        method = "Vecchia"
    white_values, white_design = whitened[:, :observed.shape[1]], whitened[:, observed.shape[1]:]
    gram = white_design.T @ white_design
    scale = 1.0 / np.sqrt(np.where(np.diag(gram) > 0, np.diag(gram), 1.0))
    gram_factor = cholesky_factor(gram * np.outer(scale, scale), "trend (mean model) matrix", TREND_REMEDY)
    inverse = linalg.cho_solve((gram_factor, True), np.eye(p), check_finite=False) * np.outer(scale, scale)
    inverse = (inverse + inverse.T) / 2.0
    return GlobalTrend(inverse @ (white_design.T @ white_values), inverse, method)


SECTORS = 8
"""Angular sectors the neighbours of local kriging around a global trend are spread over (octants)."""


def uses_global_trend(mean: MeanModel, local_mean: bool) -> bool:
    """Whether local kriging krigs residuals of a global trend: a trend beyond a constant (linear, quadratic,
    covariates) and the mean not re-estimated in each neighbourhood (``local_mean``). A constant mean stays
    ordinary kriging in each neighbourhood: a constant has no slope to extrapolate."""
    return not local_mean and (mean.kind in ("linear", "quadratic") or bool(mean.covariate_names))


def local_trend_options(xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel,
                        covariates: np.ndarray | None, local_mean: bool,
                        error_variance: np.ndarray | None = None) -> tuple[dict, str]:
    """Keyword arguments of :class:`.local.LocalKrigingPredictor` for the chosen mean, and the log words for them.

    With a global trend (:func:`uses_global_trend`): ``trend`` (:func:`estimate_trend`) and ``sectors``
    (:data:`SECTORS`); otherwise none, and for a trend re-estimated in each neighbourhood words that say so.
    """
    if not uses_global_trend(mean, local_mean):
        if uses_global_trend(mean, False):
            return {}, f"; the {mean.kind} trend is re-estimated in each neighbourhood (LOCAL_MEAN)"
        return {}, ""
    trend = estimate_trend(xy, values, covariance, mean, covariates, error_variance=error_variance)
    how = "exactly" if trend.method == "exact" else "with the Vecchia approximation"
    return ({"trend": trend, "sectors": SECTORS},
            f", spread over {SECTORS} sectors around the {mean.kind} trend"
            + (" and covariates" if mean.covariate_names else "")
            + f" estimated once from all {len(xy):,} samples (generalised least squares, {how})")


def trend_standard_errors(xy: np.ndarray, covariance: CovarianceModel, mean: MeanModel,
                          covariates: np.ndarray | None = None,
                          error_variance: np.ndarray | None = None) -> np.ndarray:
    """Standard errors ``sqrt(diag(V_beta))`` of the GLS trend coefficients given the covariance, one per term of
    ``mean.term_names`` (empty for a known mean): exact up to :data:`EXACT_TREND_LIMIT` samples, from the Vecchia
    approximation above (:func:`estimate_trend`; ``V_beta`` does not depend on the values); per-sample error
    variances, when given, join the nugget."""
    if not mean.n_terms:
        return np.zeros(0)
    return estimate_trend(xy, np.zeros(len(xy)), covariance, mean, covariates,
                          error_variance=error_variance).standard_errors
