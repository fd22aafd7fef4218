"""Unconditional values at the sample points, drawn jointly with a lattice realisation.

Conditioning by kriging (Journel & Huijbregts 1978, *Mining Geostatistics*,
chapter on conditional simulation) turns an unconditional realisation ``S`` into a conditional one::

    Z_cond(x) = Z*(x; y) + S(x) - S*(x; S_D + e)

where ``Z*(x; y)`` is the kriging prediction from the data ``y``, and
``S*(x; S_D + e)`` the prediction, with the same weights, from the unconditional
values at the sample points ``S_D`` plus simulated measurement error ``e`` (nugget
variance, plus each sample's own error variance when the data carry one). It
needs ``S`` on the lattice and ``S_D`` at the samples from one joint law, but the
samples lie between lattice nodes and the FFT simulates nodes only.

Snapping samples to the nearest node would move each datum by up to half a cell
diagonal. Instead ``S_D`` is drawn given the realisation at a neighbourhood ``U``
of lattice nodes, the union of the ``k x k`` nodes around each sample::

    S_D = A S_U + r,   A = C_DU C_UU^-1,   r ~ N(0, C_DD + nugget I + diag(e) - A C_UD)

(the conditional law of the samples given ``S_U``; ``r`` is drawn afresh for every
realisation). This reproduces exactly the covariance among the samples, among the
lattice nodes, and between the samples and every node of ``U``. It approximates the
covariance between a sample and nodes outside ``U`` by its kriging prediction from
``U``, ``C_DU C_UU^-1 C_Ug``; by the screening effect (Stein 2002, *Ann. Statist.*
30(1), 298-323) that error is small once ``U`` surrounds the sample, and
:meth:`SampleDraw.largest_cross_covariance_error` measures it. The same
limited-neighbourhood approximation underlies sequential Gaussian simulation
(common practice). Where a sample sits on a node, ``A`` picks that node and ``r``
is the measurement error alone, so with no nugget the data are honoured exactly.
``k`` is 4 when the union stays within :data:`MAX_CONDITIONING_NODES` nodes,
otherwise the largest of 3, 2, 1 that does (or 1).
"""
from __future__ import annotations

import math

import numpy as np
from scipy import linalg

from ..errors import FieldcastUsageError
from ..io.grid import GridSpec
from ..linalg.condition_policy import jittered_cholesky
from ..model.covariance import CovarianceModel
from .circulant import covariance_factor

NEIGHBOURHOOD_SIDES = (4, 3, 2, 1)
"""Candidate neighbourhood sides ``k`` (nodes per axis around each sample), best first."""

MAX_CONDITIONING_NODES = 4000
"""Largest union of neighbourhood nodes factorised (a 4000 x 4000 Cholesky, about 1 s)."""

NODES_REMEDY = ("Use a larger PIXEL_SIZE, or refit with a less smooth family such as exponential or Matérn 3/2 "
                "(KERNEL in Fit covariance model).")
"""What to change when the covariance of the lattice nodes around the samples does not factorise."""


def neighbourhood_indices(grid: GridSpec, xy: np.ndarray, side: int) -> tuple[np.ndarray, np.ndarray]:
    """Row and column indices of the ``side x side`` grid nodes around each point.

    Indices are relative to ``grid`` and may fall outside it (negative or beyond
    the last row or column) for points near or beyond its edges.

    Returns
    -------
    rows, cols : ndarray of int, shape (n, side * side)
    """
    col_position = (xy[:, 0] - grid.x_min) / grid.pixel_size - 0.5
    row_position = (grid.y_max - xy[:, 1]) / grid.pixel_size - 0.5
    shift = 0.5 * (side % 2)
    steps = np.arange(side) - (side - 1) // 2
    first_col = np.floor(col_position + shift).astype(int)
    first_row = np.floor(row_position + shift).astype(int)
    rows = first_row[:, None, None] + steps[None, :, None]
    cols = first_col[:, None, None] + steps[None, None, :]
    rows, cols = np.broadcast_arrays(rows, cols)
    return rows.reshape(len(xy), -1), cols.reshape(len(xy), -1)


def choose_neighbourhood(grid: GridSpec, xy: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Neighbourhood indices for the largest side in :data:`NEIGHBOURHOOD_SIDES` that fits the node limit."""
    for side in NEIGHBOURHOOD_SIDES:
        rows, cols = neighbourhood_indices(grid, xy, side)
        distinct = len(np.unique(np.stack([rows.ravel(), cols.ravel()]), axis=1)[0])
        if distinct <= MAX_CONDITIONING_NODES or side == 1:
            return rows, cols
    raise FieldcastUsageError(f"NEIGHBOURHOOD_SIDES {NEIGHBOURHOOD_SIDES} must end with 1.")


class SampleDraw:
    """Draws unconditional sample-point values jointly with lattice realisations.

    Parameters
    ----------
    covariance : CovarianceModel
        The model; its nugget is the measurement-error variance added at the samples.
    lattice : GridSpec
        The simulation lattice.
    xy : ndarray of shape (n, 2)
        Sample locations (CRS units).
    rows, cols : ndarray of int, shape (n, k * k)
        Lattice indices of each sample's neighbourhood (see :func:`neighbourhood_indices`);
        all must lie inside the lattice.
    error_variance : ndarray of shape (n,), optional
        Each sample's own measurement-error variance (u2), drawn beside the nugget.

    Attributes
    ----------
    side : int
        Neighbourhood side ``k``.
    jitter : float
        Diagonal jitter the node covariance needed, as a fraction of the field variance (0 normally; very
        smooth models on fine lattices), by the fit-and-draw rule of :mod:`..linalg.condition_policy`.
    """

    def __init__(self, covariance: CovarianceModel, lattice: GridSpec, xy: np.ndarray,
                 rows: np.ndarray, cols: np.ndarray, error_variance: np.ndarray | None = None) -> None:
        if rows.min() < 0 or cols.min() < 0 or rows.max() >= lattice.n_rows or cols.max() >= lattice.n_cols:
            raise FieldcastUsageError("sample neighbourhoods must lie inside the simulation lattice")
        self.covariance = covariance
        self.lattice = lattice
        self.xy = np.asarray(xy, dtype=float)
        self.side = math.isqrt(rows.shape[1])
        self.nodes = np.unique(rows.ravel() * lattice.n_cols + cols.ravel())
        node_xy = self.node_centres(self.nodes)
        factor, jitter = jittered_cholesky(covariance.cross_covariance(node_xy, node_xy),
                                           "covariance of the lattice nodes around the samples", NODES_REMEDY)
        self.jitter = jitter / covariance.field_variance if jitter else 0.0  # over the mean diagonal
        sample_node = covariance.cross_covariance(self.xy, node_xy)
        self.weights = linalg.cho_solve(factor, sample_node.T, check_finite=False).T  # A, (n, |U|)
        residual = covariance.data_covariance(self.xy, error_variance) - self.weights @ sample_node.T
        self._residual_factor = covariance_factor((residual + residual.T) / 2.0)

    def node_centres(self, flat_index: np.ndarray) -> np.ndarray:
        """Centres (CRS units) of lattice nodes given by flat raster-order indices."""
        rows, cols = np.divmod(flat_index, self.lattice.n_cols)
        p = self.lattice.pixel_size
        return np.column_stack([self.lattice.x_min + (cols + 0.5) * p, self.lattice.y_max - (rows + 0.5) * p])

    def draw(self, field: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        """Unconditional values at the samples (latent field plus measurement error) given a realisation.

        Parameters
        ----------
        field : ndarray of shape (n_rows, n_cols)
            An unconditional realisation on the lattice.
        rng : numpy.random.Generator
            Source of the residual noise.

        Returns
        -------
        ndarray of shape (n,)
        """
        return self.weights @ field.ravel()[self.nodes] + self._residual_factor @ rng.standard_normal(len(self.xy))

    def largest_cross_covariance_error(self, window: int = 8) -> float:
        """Largest error of the sample-to-node covariance, as a fraction of the field variance.

        For each sample, over the ``window x window`` lattice nodes around it (clipped
        to the lattice), ``|C(x_i, g) - A_i C_Ug|`` is the gap between the true
        covariance and the one the joint draw reproduces; the largest gap is returned.
        """
        rows, cols = neighbourhood_indices(self.lattice, self.xy, window)
        node_xy = self.node_centres(self.nodes)
        largest = 0.0
        for i in range(len(self.xy)):
            inside = (rows[i] >= 0) & (rows[i] < self.lattice.n_rows) & (cols[i] >= 0) & (cols[i] < self.lattice.n_cols)
            targets = self.node_centres(rows[i][inside] * self.lattice.n_cols + cols[i][inside])
            exact = self.covariance.cross_covariance(self.xy[i:i + 1], targets)[0]
            reproduced = self.weights[i] @ self.covariance.cross_covariance(node_xy, targets)
            largest = max(largest, float(np.max(np.abs(exact - reproduced))))
        return largest / self.covariance.field_variance
