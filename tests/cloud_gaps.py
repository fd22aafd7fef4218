"""A satellite-like gap-filling case of our own: invented data for simulation studies and the benchmark.

A smooth field measured on a lattice loses about 30 % of its cells in large contiguous blobs (as clouds hide
a satellite's view), and the gaps must be predicted. The field is a two-scale Matérn 3/2 Gaussian field (a
short structure of range 2 cells and a long one of range 20 % of the lattice's width) plus a linear trend and
a small nugget. Nothing here is a published data set: the truth is known because it was drawn, which is what
lets a test or the benchmark score a prediction against it.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fieldcast.algorithms import CovarianceModel, Structure, UnconditionalGenerator

CELL = 1.0
"""Lattice spacing (distance units of the case: read them as km)."""
SHORT_RANGE_CELLS = 2.0
LONG_RANGE_SHARE = 0.2
GAP_SHARE = 0.3
CLOUD_RANGE_CELLS = 12.0
TREND_SLOPE = (0.004, -0.003)
"""Change of the trend per distance unit along x and y (field units per km)."""


@dataclass(frozen=True)
class CloudGapCase:
    """One drawn case.

    Attributes
    ----------
    shape : (int, int)
        Rows and columns of the lattice.
    xy : ndarray, shape (rows * cols, 2)
        Cell centres, row by row from the top; x east, y north (distance units).
    signal : ndarray
        Trend plus the two-scale field at every cell, without the nugget: what a prediction aims at.
    values : ndarray
        ``signal`` plus the nugget's independent noise: what an observation would record.
    observed : ndarray of bool
        True where the cell is seen (about 70 %), False in the gaps.
    covariance : CovarianceModel
        The true model (nugget and the two structures).
    trend : ndarray, shape (3,)
        The true intercept and slopes along x and y.
    """

    shape: tuple[int, int]
    xy: np.ndarray
    signal: np.ndarray
    values: np.ndarray
    observed: np.ndarray
    covariance: CovarianceModel
    trend: np.ndarray

    @property
    def gaps(self) -> np.ndarray:
        """True at the hidden cells."""
        return ~self.observed


def true_covariance(shape: tuple[int, int]) -> CovarianceModel:
    """The two-scale model of a lattice of ``shape``: nugget 0.02, short 0.3, long 1.0 (field units squared)."""
    long_range = LONG_RANGE_SHARE * shape[1] * CELL
    return CovarianceModel(
        (Structure("matern32", 0.3, SHORT_RANGE_CELLS * CELL),
         Structure("matern32", 1.0, long_range)),
        nugget=0.02)


def _lattice(shape: tuple[int, int]) -> np.ndarray:
    rows, cols = np.meshgrid(np.arange(shape[0]), np.arange(shape[1]), indexing="ij")
    return np.column_stack([(cols.ravel() + 0.5) * CELL, (shape[0] - rows.ravel() - 0.5) * CELL])


def _cloud_mask(shape: tuple[int, int], rng: np.random.Generator) -> np.ndarray:
    """Contiguous blobs covering GAP_SHARE of the lattice: the lowest cells of a smooth Gaussian field."""
    clouds = CovarianceModel((Structure("gaussian", 1.0, CLOUD_RANGE_CELLS * CELL),), nugget=0.0)
    cover, _ = UnconditionalGenerator(clouds, shape, CELL).draw_pair(rng)
    return (cover > np.quantile(cover, GAP_SHARE)).ravel()


def cloud_gap_case(shape: tuple[int, int] = (300, 500), seed: int = 20261203) -> CloudGapCase:
    """Draw the case on a lattice of ``shape`` (rows, columns) with ``seed`` (reproducible)."""
    rng = np.random.default_rng(seed)
    covariance = true_covariance(shape)
    structures = CovarianceModel(covariance.structures, nugget=0.0)
    field, _ = UnconditionalGenerator(structures, shape, CELL).draw_pair(rng)
    xy = _lattice(shape)
    trend = np.array([1.0, *TREND_SLOPE])
    signal = trend[0] + xy @ trend[1:] + field.ravel()
    values = signal + np.sqrt(covariance.nugget) * rng.standard_normal(signal.size)
    return CloudGapCase(shape, xy, signal, values, _cloud_mask(shape, rng), covariance, trend)
