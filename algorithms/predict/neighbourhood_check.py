"""How far local kriging departs from kriging with every sample, measured at a few targets.

A moving neighbourhood is an approximation whose quality depends on the model:
with a smooth covariance and a short range the nearest samples screen the
others and local kriging matches global kriging closely; with a long range, a
large nugget share or a spherical model (little screening; Stein 2002, *Ann.
Statist.* 30(1), 298-323) the far samples still matter, and local ordinary
kriging also re-estimates the mean in every neighbourhood. So the departure
is measured, not assumed: both predictors are run at up to
:data:`CHECK_TARGETS` cells of the output grid drawn at random (fixed seed)
and the largest differences are reported, the prediction's as a fraction of the field's
standard deviation (the square root of the sill) and the variance's as a
fraction of the sill, so that both are free of the data's units.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..io.grid import GridSpec
from .kriging import KrigingPredictor
from .local import LocalKrigingPredictor

CHECK_TARGETS = 500
"""Targets at which local and global kriging are compared."""

CHECK_SAMPLE_LIMIT = 2000
"""Most samples for which the global predictor is built for the comparison (its factorisation is O(n^3))."""


@dataclass(frozen=True)
class NeighbourhoodGap:
    """Largest differences between local and global kriging at the targets compared.

    Attributes
    ----------
    prediction : float
        Largest absolute difference of the kriging mean, as a fraction of
        the square root of the sill (dimensionless).
    variance : float
        Largest absolute difference of the kriging variance, as a fraction
        of the sill (dimensionless).
    targets : int
        Number of targets compared (those local kriging resolved).
    """

    prediction: float
    variance: float
    targets: int


def neighbourhood_gap(local: LocalKrigingPredictor, xy: np.ndarray, values: np.ndarray, targets: np.ndarray,
                      covariates: np.ndarray | None = None,
                      covariates0: np.ndarray | None = None) -> NeighbourhoodGap:
    """Compare ``local`` with kriging from every sample at ``targets`` (a few hundred, e.g. :func:`grid_targets`).

    Parameters
    ----------
    local : LocalKrigingPredictor
        The local predictor, built on ``xy`` and ``values``.
    xy : ndarray of shape (n, 2)
        Its samples (CRS units); at most :data:`CHECK_SAMPLE_LIMIT`.
    values : ndarray of shape (n,) or (n, m)
        Its sample values (modelling scale); with several fields the first is compared.
    targets : ndarray of shape (M, 2)
        Targets (CRS units).
    covariates, covariates0 : ndarray, optional
        External-drift values at the samples and at the targets.
    """
    local_mean, local_variance = local.predict(targets, covariates0)
    first = values if values.ndim == 1 else values[:, 0]
    local_mean = local_mean.reshape(len(targets), -1)[:, 0]
    global_mean, global_variance = KrigingPredictor(xy, first, local.covariance, local.mean, covariates,
                                                    local.error_variance).predict(targets, covariates0)
    resolved = ~np.isnan(local_mean)
    if not resolved.any():
        return NeighbourhoodGap(np.nan, np.nan, 0)
    sill = local.covariance.sill
    return NeighbourhoodGap(float(np.max(np.abs(local_mean - global_mean)[resolved])) / math.sqrt(sill),
                            float(np.max(np.abs(local_variance - global_variance)[resolved])) / sill,
                            int(np.count_nonzero(resolved)))


def grid_targets(grid: GridSpec, inside: np.ndarray | None, count: int = CHECK_TARGETS, seed: int = 0) -> np.ndarray:
    """Centres (k, 2) of up to ``count`` distinct cells of ``grid`` drawn at random among those ``inside``.

    ``inside`` is the (n_rows, n_cols) cell mask; None means every cell.

    A grid of up to ``20 * count`` cells is listed whole; a larger one (it may have tens of millions
    of cells) is not: ``20 * count`` random cell numbers are drawn, of which the distinct ones
    inside the mask are kept.
    """
    rng = np.random.default_rng(seed)
    if grid.n_cells <= 20 * count:
        drawn = np.arange(grid.n_cells)
    else:
        drawn = np.unique(rng.integers(0, grid.n_cells, size=20 * count))
    if inside is not None:
        drawn = drawn[inside.ravel()[drawn]]
    drawn = rng.permutation(drawn)[:count]
    rows, cols = np.divmod(drawn, grid.n_cols)
    return np.column_stack([grid.x_min + (cols + 0.5) * grid.pixel_size, grid.y_max - (rows + 0.5) * grid.pixel_size])


class TargetDraw:
    """Up to ``count`` points drawn at random, all equally likely, from points that arrive in chunks.

    Each point gets a uniform random key (fixed ``seed``) and the ``count`` smallest keys are kept, so the
    memory stays that of ``count`` points however many arrive (a streamed sample without replacement).
    """

    def __init__(self, count: int = CHECK_TARGETS, seed: int = 0) -> None:
        self.count = count
        self.rng = np.random.default_rng(seed)
        self.keys = np.empty(0)
        self.points = np.empty((0, 2))

    def add(self, xy: np.ndarray) -> None:
        """Offer the points ``xy`` (m, 2)."""
        keys = np.concatenate([self.keys, self.rng.random(len(xy))])
        points = np.concatenate([self.points, np.asarray(xy, dtype=float).reshape(-1, 2)])
        kept = np.argsort(keys, kind="stable")[:self.count]
        self.keys, self.points = keys[kept], points[kept]

    @property
    def targets(self) -> np.ndarray:
        """The points drawn so far, (k, 2) with k at most ``count``."""
        return self.points
