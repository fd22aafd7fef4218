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
    centres = as_points(centres, "Cell centres")
    covariates0 = None if covariates0 is None else np.asarray(covariates0, dtype=float)
    starts = range(0, len(centres), int(chunk_size))
    parts = []
    for done, start in enumerate(starts, start=1):
        if should_stop is not None and should_stop():
            raise Cancelled("Block kriging was cancelled.")
        chunk = slice(start, start + int(chunk_size))
        parts.append(blocks.predict(centres[chunk], None if covariates0 is None else covariates0[chunk]))
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
