"""Block kriging: each cell's value as the average of the latent field over the cell.

A square cell ``B`` of side ``p`` centred on ``x0`` is discretised into ``d x d``
points at the centres of its sub-cells, offsets ``((i + 0.5) / d - 0.5) p`` for
``i = 0 .. d - 1`` on each axis (block kriging as in Journel & Huijbregts 1978, *Mining Geostatistics*, and
Isaaks & Srivastava 1989, *An Introduction to Applied Geostatistics*; 4 x 4
points per block is common practice). The block average ``Z_B`` is the mean of the field
at those points, a linear functional of the field, so it is kriged with the point
system in which the target's covariances are replaced by block averages: ``c_B``
the mean covariance between each sample and the discretisation points, ``f_B`` the
mean of the trend terms over those points, and ``C_BB`` the mean of the latent
covariance over all ``d^4`` pairs of discretisation points (the same for every cell
of a grid)::

    mean_B = f_B^T beta + c_B^T K^-1 (y - F beta)
    var_B  = C_BB - c_B^T K^-1 c_B + g^T A^-1 g,   g = f_B - F^T K^-1 c_B

(:meth:`.kriging.KrigingPredictor.predict_from_covariances`, one solve with the
predictor's factorisation). By linearity ``mean_B`` is the mean of the point
predictions and the weights are the mean of the point weights. The nugget does not
enter ``C_BB``: measurement error and micro-scale variation average out over a
block. The block variance is below the point variance at the cell centre, except
where a sample lies within a few per cent of the cell size from that centre: there
the point prediction leans on the sample and the block average cannot.

Log models (:func:`arithmetic_block_predict`). Remediation is decided on the arithmetic
average in attribute units, ``A = mean_i exp(Y_i) - offset`` over the discretisation,
not on the average of the logs. Given the data the ``Y_i`` are jointly Gaussian (mean
``mu_i``, error covariance ``S``, :meth:`.kriging.KrigingPredictor.joint_predict`), so
exactly (lognormal moments, Aitchison & Brown 1957)::

    E[A] + offset = M = mean_i exp(mu_i + S_ii / 2)
    Var[A]        = V = mean_ij exp(mu_i + mu_j + (S_ii + S_jj) / 2) (exp(S_ij) - 1)

The law of ``A + offset``, a sum of correlated lognormals, is approximated by the
lognormal with the same two moments (Fenton 1960, *IRE Trans. Commun. Syst.* 8(1),
57-67, moment matching): log-scale equivalents ``s2 = ln(1 + V / M^2)`` and
``mu = ln M - s2 / 2``. They are returned in place of a kriging mean and variance, so
the back-transformed mean and variance of a surface are the exact ``E[A]`` and
``Var[A]``, and its exceedance probability and quantiles those of the approximation.
"""
from __future__ import annotations

from collections.abc import Callable

import numpy as np

from ..errors import Cancelled, FieldcastError
from ..model.covariance import CovarianceModel, pairwise_offsets
from .kriging import KrigingPredictor, as_points

DEFAULT_POINTS_PER_SIDE = 4
"""Discretisation points per cell side (4 x 4 = 16 per cell, common practice)."""


def block_offsets(pixel_size: float, points_per_side: int = DEFAULT_POINTS_PER_SIDE) -> np.ndarray:
    """Offsets (CRS units) of the ``d x d`` discretisation points from the cell centre, shape (d*d, 2)."""
    if int(points_per_side) != points_per_side or points_per_side < 1:
        raise FieldcastError(f"The block discretisation needs a whole number of points per side (>= 1); "
                             f"got {points_per_side!r}.")
    steps = ((np.arange(int(points_per_side)) + 0.5) / points_per_side - 0.5) * pixel_size
    dx, dy = np.meshgrid(steps, steps)
    return np.column_stack([dx.ravel(), dy.ravel()])


def block_covariance(covariance: CovarianceModel, pixel_size: float,
                     points_per_side: int = DEFAULT_POINTS_PER_SIDE) -> float:
    """Mean latent covariance ``C_BB`` over all pairs of discretisation points of one cell (units squared)."""
    offsets = block_offsets(pixel_size, points_per_side)
    return float(np.mean(covariance.covariance_from_offsets(*pairwise_offsets(offsets))))


def block_predict(predictor: KrigingPredictor, centres: np.ndarray, pixel_size: float,
                  covariates0: np.ndarray | None = None, *, points_per_side: int = DEFAULT_POINTS_PER_SIDE,
                  chunk_size: int = 256, progress: Callable[[float], None] | None = None,
                  should_stop: Callable[[], bool] | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Block kriging mean and error variance for square cells.

    Parameters
    ----------
    predictor : KrigingPredictor
        Predictor built from the samples (its factorisation and sample locations are reused).
    centres : ndarray of shape (m, 2)
        Cell centres (CRS units), e.g. ``GridSpec.cell_centres()``.
    pixel_size : float
        Cell side (CRS units).
    covariates0 : ndarray of shape (m, k), optional
        Covariates per cell; every discretisation point of a cell takes its cell's value.
    points_per_side : int
        Discretisation ``d``; ``d * d`` points per cell.
    chunk_size : int
        Cells per chunk (memory about ``8 n d^2 chunk_size`` bytes).
    progress, should_stop : callable, optional
        Progress per chunk; ``should_stop()`` raises :class:`Cancelled`.

    Returns
    -------
    mean, variance : ndarray of shape (m,)
        Block prediction (modelling units) and block error variance (units squared, >= 0).
    """
    blocks = _BlockSystem(predictor, pixel_size, points_per_side)
    return _in_chunks(blocks.predict, as_points(centres, "Cell centres"), covariates0, chunk_size, progress,
                      should_stop)


def arithmetic_block_predict(predictor: KrigingPredictor, centres: np.ndarray, pixel_size: float,
                             covariates0: np.ndarray | None = None, *,
                             points_per_side: int = DEFAULT_POINTS_PER_SIDE, chunk_size: int = 256,
                             progress: Callable[[float], None] | None = None,
                             should_stop: Callable[[], bool] | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Log-scale equivalents ``(mu, s2)`` of each cell's arithmetic average for a log model (module notes).

    Parameters as for :func:`block_predict`; the predictor krigs the log-scale values.

    Returns
    -------
    mean, variance : ndarray of shape (m,)
        ``mu = ln M - s2 / 2`` and ``s2 = ln(1 + V / M^2)``: ``exp(mu + s2 / 2) - offset`` is the exact
        expected arithmetic average of the cell, ``exp(2 mu + s2) (exp(s2) - 1)`` its exact variance.
    """
    offsets = block_offsets(pixel_size, points_per_side)

    def predict(chunk: np.ndarray, columns: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
        points = (chunk[:, None, :] + offsets[None, :, :]).reshape(-1, 2)
        point_columns = None if columns is None else np.repeat(columns, len(offsets), axis=0)
        mean, joint = predictor.joint_predict(points, point_columns, group_size=len(offsets))
        diagonal = np.arange(len(offsets))
        point_means = np.exp(mean.reshape(len(chunk), -1) + 0.5 * joint[:, diagonal, diagonal])
        first = np.mean(point_means, axis=1)
        spread = np.einsum("ga,gb,gab->g", point_means, point_means, np.expm1(joint)) / len(offsets) ** 2
        log_variance = np.log1p(np.clip(spread, 0.0, None) / first ** 2)
        return np.log(first) - 0.5 * log_variance, log_variance

    return _in_chunks(predict, as_points(centres, "Cell centres"), covariates0, chunk_size, progress, should_stop)


def _in_chunks(predict: Callable, centres: np.ndarray, covariates0: np.ndarray | None, chunk_size: int,
               progress: Callable[[float], None] | None,
               should_stop: Callable[[], bool] | None) -> tuple[np.ndarray, np.ndarray]:
    """``predict(centres, covariates)`` over chunks of ``chunk_size`` cells, with progress and cancel."""
    covariates0 = None if covariates0 is None else np.asarray(covariates0, dtype=float)
    starts = range(0, len(centres), int(chunk_size))
    parts = []
    for done, start in enumerate(starts, start=1):
        if should_stop is not None and should_stop():
            raise Cancelled("Block kriging was cancelled.")
        chunk = slice(start, start + int(chunk_size))
        parts.append(predict(centres[chunk], None if covariates0 is None else covariates0[chunk]))
        if progress is not None:
            progress(done / len(starts))
    if not parts:
        return np.empty(0), np.empty(0)
    mean, variance = (np.concatenate(column) for column in zip(*parts))
    return mean, variance


class _BlockSystem:
    """What every chunk of blocks shares: the predictor, the discretisation offsets and ``C_BB``."""

    def __init__(self, predictor: KrigingPredictor, pixel_size: float, points_per_side: int) -> None:
        self.predictor = predictor
        self.offsets = block_offsets(pixel_size, points_per_side)
        self.within = block_covariance(predictor.covariance, pixel_size, points_per_side)

    def predict(self, centres: np.ndarray, covariates0: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
        """Block mean and error variance for cells centred at ``centres`` (m, 2)."""
        per_cell = len(self.offsets)
        points = (centres[:, None, :] + self.offsets[None, :, :]).reshape(-1, 2)
        point_covariates = None if covariates0 is None else np.repeat(covariates0, per_cell, axis=0)
        predictor = self.predictor
        cross = predictor.covariance.cross_covariance(predictor.xy, points)
        cross = cross.reshape(predictor.n, -1, per_cell).mean(axis=2)  # c_B, (n, m)
        design = predictor.mean.design(points, point_covariates)
        design = design.reshape(len(centres), per_cell, -1).mean(axis=1)  # f_B, (m, p)
        return predictor.predict_from_covariances(cross, design, self.within)
