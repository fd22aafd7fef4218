"""Conditional simulation of the latent field on a raster grid, and summaries of the realisations.

Each realisation is drawn in the modelling scale by conditioning by kriging
(Journel & Huijbregts 1978, *Mining Geostatistics*)::

    Z_cond(x) = m0 + S(x) + lambda(x)^T (y - m0 - S_D - e)

with ``S`` an unconditional realisation of the latent field (circulant embedding,
:mod:`.circulant`), ``S_D + e`` its values at the samples plus measurement error
(drawn jointly with ``S``, :mod:`.conditioning`), ``lambda(x)`` the kriging weights
of the data (:meth:`.kriging.KrigingPredictor.weights`), ``y`` the data and ``m0``
the known mean (simple kriging; 0 otherwise, where the weights carry the trend).
With ``neighbours > 0`` the weights are local
(:meth:`.neighbourhood.LocalKrigingPredictor.weights`): each cell's kriged
residual is ``sum_k w[cell, k] * r[idx[cell, k]]`` over its ``k`` nearest
samples, gathered for all realisations at once; cells with too few neighbours
within the search radius are NaN in every realisation. With a linear, quadratic or
covariate trend and ``local_mean`` False the neighbourhoods do not re-estimate the
trend: it is estimated once from all samples by generalised least squares
(:mod:`..predict.global_trend`), the residuals are conditioned by local simple
kriging (the neighbours spread over sectors), and each realisation adds the trend
with its own coefficients: this conditions on the data with a flat prior on the
coefficients, realisation ``r`` drawing them from their GLS posterior
``N(beta_hat, V_beta)`` (:mod:`.trend_draw`), so the trend's estimation
uncertainty is in the spread of the realisations.
Over realisations ``Z_cond(x)`` has the kriging mean and, per cell, the kriging
variance of the latent field (nugget excluded). The weights do not depend on the
realisation: they are computed once per block of cells, and all realisations of
that block follow from one matrix product.

The lattice is the output grid extended, on the same cell alignment, to hold every
sample's neighbourhood. Log-transformed models are simulated in the log scale and
each cell is back-transformed, ``exp(Z) - offset``. The unconditional fields come
in independent pairs (real and imaginary parts of one FFT); a ``seed`` makes a run
reproducible.
"""
from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np

from ..errors import Cancelled, FieldcastError
from ..io.grid import GridSpec, format_bytes
from ..model.covariance import CovarianceModel
from ..model.mean import MeanModel
from ..model.transform import Transform
from ..predict.global_trend import local_trend_options
from ..predict.kriging import KrigingPredictor
from ..predict.local import LocalKrigingPredictor
from .circulant import UnconditionalGenerator
from .conditioning import SampleDraw, choose_neighbourhood
from .trend_draw import TrendDraws

MAX_REALISATION_BYTES = 4e9
"""Default limit on the memory held by the realisations (bytes)."""

SUMMARY_ROWS = 64
"""Grid rows summarised at a time (bounds the temporary memory of percentiles)."""


@dataclass
class SimulationResult:
    """Conditional realisations on a grid.

    Attributes
    ----------
    realisations : ndarray of shape (n_realisations, n_rows, n_cols)
        Realisations in attribute units (back-transformed when the model is log).
    grid : GridSpec
        The output grid.
    method : str
        ``"circulant embedding"`` or ``"Cholesky"`` (small lattices whose embedding failed).
    padded_shape : (int, int) or None
        Torus size of the circulant embedding.
    neighbourhood_side : int
        Lattice nodes per axis around each sample used to draw its unconditional value.
    seed : int or None
        Seed of the random generator.
    warnings : list of str
        Fall-backs and approximations, in plain words.
    unresolved : int
        Cells left as NaN in every realisation (local conditioning: too few
        neighbours within the search radius, or a singular local system).
    notes : list of str
        How local conditioning treats the trend, and enlarged paddings of an embedding that ended exact:
        information for the log.
    """

    realisations: np.ndarray
    grid: GridSpec
    method: str
    padded_shape: tuple[int, int] | None
    neighbourhood_side: int
    seed: int | None
    warnings: list[str] = field(default_factory=list)
    unresolved: int = 0
    notes: list[str] = field(default_factory=list)

    def unresolved_cells(self, mask: np.ndarray | None = None) -> int:
        """Cells left NaN in every realisation, counted inside ``mask`` (bool, grid shape) when given.

        Without a mask this is :attr:`unresolved`; with one, only the unresolved cells the mask keeps
        (those a masked output would show), so the log does not count cells written as nodata anyway.
        """
        if not self.unresolved or mask is None:
            return self.unresolved
        return int(np.count_nonzero(np.isnan(self.realisations[0]) & np.asarray(mask, dtype=bool)))


def simulation_lattice(grid: GridSpec, rows: np.ndarray, cols: np.ndarray) -> tuple[GridSpec, int, int]:
    """The grid extended on its own alignment to hold the given node indices.

    Returns
    -------
    lattice : GridSpec
    row_offset, col_offset : int
        Lattice index of the grid's first row and column.
    """
    row_offset = max(0, -int(rows.min()))
    col_offset = max(0, -int(cols.min()))
    n_rows = max(grid.n_rows, int(rows.max()) + 1) + row_offset
    n_cols = max(grid.n_cols, int(cols.max()) + 1) + col_offset
    p = grid.pixel_size
    lattice = GridSpec(grid.x_min - col_offset * p, grid.y_max + row_offset * p, p, n_cols, n_rows)
    return lattice, row_offset, col_offset


def _check_count(n_realisations: int) -> int:
    if int(n_realisations) != n_realisations or n_realisations < 1:
        raise FieldcastError(f"The number of realisations must be a whole number of at least 1; "
                             f"got {n_realisations!r}.")
    return int(n_realisations)


def simulate_conditional(xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel,
                         grid: GridSpec, *, n_realisations: int, seed: int | None = None,
                         transform: Transform | None = None, covariates: np.ndarray | None = None,
                         grid_covariates: np.ndarray | None = None, neighbours: int = 0,
                         search_radius: float | None = None, local_mean: bool = False, chunk_size: int = 4096,
                         max_bytes: float = MAX_REALISATION_BYTES, error_variance: np.ndarray | None = None,
                         value_sets: np.ndarray | None = None,
                         progress: Callable[[float], None] | None = None,
                         should_stop: Callable[[], bool] | None = None) -> SimulationResult:
    """Conditional realisations of the latent field on ``grid``.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations (CRS units).
    values : ndarray of shape (n,)
        Sample values in the modelling scale (already transformed).
    covariance, mean : CovarianceModel, MeanModel
        The fitted model; the nugget is treated as measurement error.
    grid : GridSpec
        Output grid.
    n_realisations : int
        Number of realisations (>= 1).
    seed : int, optional
        Seed of ``numpy.random.default_rng``; the same seed gives the same realisations.
    transform : Transform, optional
        Back-transform applied to every cell of every realisation.
    covariates, grid_covariates : ndarray, optional
        External-drift values at the samples (n, k) and at the cells in raster order
        (n_rows * n_cols, k), when the mean model names covariates.
    neighbours : int
        Samples conditioning each cell (local kriging weights); 0 uses all samples.
    search_radius : float, optional
        Major semi-axis of the search ellipse (CRS units) when ``neighbours > 0``;
        None searches all samples.
    local_mean : bool
        With ``neighbours > 0``: re-estimate a linear, quadratic or covariate trend in each neighbourhood
        (universal kriging weights of the neighbours) instead of conditioning the residuals of the trend
        estimated from all samples, with coefficients drawn per realisation (module docstring). A constant or
        known mean is kriged in each neighbourhood either way.
    chunk_size : int
        Cells per block of kriging weights; memory about ``8 n chunk_size`` bytes.
    max_bytes : float
        Limit on the memory of the realisations (``8 * n_realisations * cells`` bytes).
    error_variance : ndarray of shape (n,), optional
        Per-sample measurement-error variances (modelling units squared): added to the diagonal of the kriging
        system, and drawn at the samples beside the nugget, so each realisation honours a datum within its error.
    value_sets : ndarray of shape (m, n), optional
        Completed data sets of samples with values below a limit (modelling scale): realisation ``r`` is
        conditioned on set ``r mod m`` instead of ``values`` (which then only frames the kriging weights).
    progress, should_stop : callable, optional
        Progress fraction, reported per realisation and per block; ``should_stop()``
        is asked between realisations and blocks and raises :class:`Cancelled`.

    Returns
    -------
    SimulationResult
    """
    count = _check_count(n_realisations)
    needed = 8.0 * count * grid.n_cells
    if needed > max_bytes:
        raise FieldcastError(
            f"{count} realisations of {grid.n_cells:,} cells need {format_bytes(needed)} of memory, more than the "
            f"{format_bytes(max_bytes)} allowed; ask for fewer realisations, or use a larger pixel size or a "
            "smaller extent.")
    if not covariance.field_variance > 0:
        raise FieldcastError("The covariance model has no spatial structure (every partial sill is zero), so there "
                             "is no field to simulate; fit a model with a structure, or map the kriging mean.")
    notes = []
    if neighbours:
        options, words = local_trend_options(xy, values, covariance, mean, covariates, local_mean, error_variance)
        predictor = LocalKrigingPredictor(xy, values, covariance, mean, neighbours=neighbours,
                                          search_radius=search_radius, covariates=covariates,
                                          error_variance=error_variance, **options)
        if words:
            notes.append(f"Local conditioning{words}"
                         + ("; each realisation adds that trend with its coefficients drawn from their distribution "
                            "given the data, so the trend's uncertainty is in the spread." if options else "."))
        if predictor.sharing_words("cell"):
            notes.append(f"Local conditioning: {predictor.sharing_words('cell')}.")
    else:
        predictor = KrigingPredictor(xy, values, covariance, mean, covariates, error_variance)
    generator, sampler, window = _unconditional_sources(covariance, grid, np.asarray(xy, dtype=float),
                                                        predictor.error_variance)
    steps = _Steps(count + -(-grid.n_cells // int(chunk_size)), progress, should_stop)
    rng = np.random.default_rng(seed)
    realisations = np.empty((count, grid.n_rows, grid.n_cols))
    at_samples = np.empty((count, predictor.n))
    for index in range(count):  # one FFT gives two realisations; progress and cancel go one by one
        steps.check()
        if index % 2 == 0:
            pair = generator.draw_pair(rng)
        unconditional = pair[index % 2]
        realisations[index] = unconditional[window]
        at_samples[index] = sampler.draw(unconditional, rng)
        steps.advance(1)

    known = mean.known_mean(1)[0]
    data = np.asarray(values, dtype=float)[None, :] if value_sets is None else np.asarray(value_sets, dtype=float)
    residuals = (data[np.arange(count) % len(data)] - known) - at_samples  # (R, n)
    draws = None
    if neighbours and predictor.trend is not None:
        draws = TrendDraws.draw(predictor.trend, np.asarray(xy, dtype=float), data, covariance, mean, covariates,
                                count, rng, error_variance)
        residuals -= draws.at_samples
    flat = realisations.reshape(count, -1)
    cells = grid.cell_centres()
    unresolved = 0
    for start in range(0, grid.n_cells, int(chunk_size)):
        steps.check()
        stop = min(start + int(chunk_size), grid.n_cells)
        block_covariates = None if grid_covariates is None else np.asarray(grid_covariates)[start:stop]
        if neighbours:
            indices, weights = predictor.weights(cells[start:stop], block_covariates)
            unresolved += predictor.last_unresolved
            block = flat[:, start:stop]
            block += known if draws is None else draws.at_cells(cells[start:stop], block_covariates)
            for slot in range(indices.shape[1]):  # gather one neighbour slot at a time: memory 8 R chunk_size
                block += residuals[:, indices[:, slot]] * weights[:, slot]
        else:
            flat[:, start:stop] += known + residuals @ predictor.weights(cells[start:stop], block_covariates)
        steps.advance(1)
    if transform is not None and transform.kind != "none":
        for realisation in realisations:  # one at a time, in place, through the inverse transform g(y)
            realisation[...] = transform.back_median(realisation)
    warnings = list(generator.warnings)
    if sampler.jitter:
        warnings.append("The covariance of the lattice nodes around the samples was numerically singular (a very "
                        f"smooth model); a jitter of {sampler.jitter:.0e} of the field variance was added to draw the "
                        "unconditional values at the samples.")
    return SimulationResult(realisations, grid, generator.method, generator.padded_shape, sampler.side, seed,
                            warnings, unresolved, notes + list(generator.notes))


class _Steps:
    """Reports progress over a known number of steps and raises Cancelled when asked to stop."""

    def __init__(self, total: int, progress: Callable[[float], None] | None,
                 should_stop: Callable[[], bool] | None) -> None:
        self.total, self.done = total, 0
        self.progress, self.should_stop = progress, should_stop

    def check(self) -> None:
        if self.should_stop is not None and self.should_stop():
            raise Cancelled("Simulation was cancelled.")

    def advance(self, steps: int) -> None:
        self.done += steps
        if self.progress is not None:
            self.progress(self.done / self.total)


def _unconditional_sources(covariance: CovarianceModel, grid: GridSpec, xy: np.ndarray,
                           error_variance: np.ndarray | None
                           ) -> tuple[UnconditionalGenerator, SampleDraw, tuple[slice, slice]]:
    """The lattice generator, the sample-point draw, and the window of the output grid in the lattice."""
    rows, cols = choose_neighbourhood(grid, xy)
    lattice, row_offset, col_offset = simulation_lattice(grid, rows, cols)
    try:
        generator = UnconditionalGenerator(covariance, (lattice.n_rows, lattice.n_cols), lattice.pixel_size)
    except FieldcastError as error:
        if lattice.n_cells == grid.n_cells:
            raise
        raise FieldcastError(
            f"{error} Samples beyond the output grid extend the simulation lattice from {grid.n_rows} x "
            f"{grid.n_cols} to {lattice.n_rows} x {lattice.n_cols} cells; use an extent that covers the samples "
            "or leave out distant samples.") from None
    sampler = SampleDraw(covariance, lattice, xy, rows + row_offset, cols + col_offset, error_variance)
    window = (slice(row_offset, row_offset + grid.n_rows), slice(col_offset, col_offset + grid.n_cols))
    return generator, sampler, window


@dataclass
class RealisationSummary:
    """Per-cell and per-realisation summaries of a set of realisations.

    Attributes
    ----------
    mean, std : ndarray of shape (n_rows, n_cols)
        Mean and standard deviation (``ddof = 1``) over realisations, attribute units.
    p10, p90 : ndarray of shape (n_rows, n_cols)
        10th and 90th percentiles over realisations (linear interpolation).
    share_above : ndarray of shape (n_rows, n_cols) or None
        Fraction of realisations above the threshold.
    area_above : ndarray of shape (n_realisations,) or None
        Area of masked cells above the threshold in each realisation (CRS units squared).
    mask_mean : ndarray of shape (n_realisations,)
        Mean over the masked cells of each realisation (attribute units).
    mask_area : float
        Area of the masked cells (CRS units squared).
    """

    mean: np.ndarray
    std: np.ndarray
    p10: np.ndarray
    p90: np.ndarray
    share_above: np.ndarray | None
    area_above: np.ndarray | None
    mask_mean: np.ndarray
    mask_area: float

    def area_percentiles(self, percents: Sequence[float]) -> np.ndarray:
        """Percentiles (0-100) over realisations of :attr:`area_above` (CRS units squared), one per percent.

        Linear interpolation between order statistics: the ``p`` percentile of ``R`` sorted areas lies at
        position ``(R - 1) p / 100`` (Hyndman & Fan 1996, *Am. Stat.* 50(4), definition 7).

        Raises
        ------
        FieldcastError
            Without a threshold (no area above it).
        """
        if self.area_above is None:
            raise FieldcastError("Areas above a threshold need a THRESHOLD.")
        return np.percentile(self.area_above, list(percents))


def summarise_realisations(realisations: np.ndarray, cell_area: float, *, threshold: float | None = None,
                           mask: np.ndarray | None = None) -> RealisationSummary:
    """Summaries of realisations of shape (R, n_rows, n_cols).

    Parameters
    ----------
    realisations : ndarray of shape (R, n_rows, n_cols)
        Realisations in attribute units (R >= 2 for a standard deviation).
    cell_area : float
        Area of one cell (CRS units squared), e.g. ``grid.pixel_size ** 2``.
    threshold : float, optional
        Value (attribute units) for the share above it and the area above it.
    mask : ndarray of bool, shape (n_rows, n_cols), optional
        Cells counted in the per-realisation area and mean; all cells by default.

    Cells that are NaN in any realisation (nodata, e.g. cells local conditioning
    left unresolved) get NaN in every per-cell summary and are left out of the
    masked area and mean.
    """
    stack = np.asarray(realisations, dtype=float)
    if stack.ndim != 3 or len(stack) < 2:
        raise FieldcastError("Summaries need at least two realisations on a grid (an array of shape "
                             f"(R, rows, cols) with R >= 2); got shape {stack.shape}.")
    inside = np.ones(stack.shape[1:], dtype=bool) if mask is None else np.asarray(mask, dtype=bool)
    if inside.shape != stack.shape[1:]:
        raise FieldcastError(f"The mask has shape {inside.shape} but the grid has {stack.shape[1:]}; "
                             "use a mask made for the same grid.")
    if not inside.any():
        raise FieldcastError("The mask leaves no cell to summarise; use a mask that covers part of the grid.")
    per_cell = np.empty((5,) + stack.shape[1:])  # mean, std, p10, p90, share above
    per_realisation = np.zeros((2, len(stack)))  # sum over masked cells, masked cells above
    n_inside = 0
    for first in range(0, stack.shape[1], SUMMARY_ROWS):
        rows = slice(first, first + SUMMARY_ROWS)
        block = stack[:, rows]
        resolved = np.isfinite(block).all(axis=0)
        block_mask = inside[rows] & resolved
        n_inside += int(block_mask.sum())
        per_cell[0, rows], per_cell[1, rows] = block.mean(axis=0), block.std(axis=0, ddof=1)
        per_cell[2:4, rows] = np.quantile(block, [0.1, 0.9], axis=0)
        per_realisation[0] += block[:, block_mask].sum(axis=1)
        if threshold is not None:
            above = block > threshold
            per_cell[4, rows] = np.where(resolved, above.mean(axis=0), np.nan)
            per_realisation[1] += above[:, block_mask].sum(axis=1)
    if n_inside == 0:
        raise FieldcastError("Every cell of the mask is nodata in the realisations (no neighbours within the search "
                             "radius); enlarge SEARCH_RADIUS (or leave it empty), or choose a MASK or EXTENT near "
                             "the samples.")
    cell_area = float(cell_area)
    share_above, area_above = (None, None) if threshold is None else (per_cell[4], per_realisation[1] * cell_area)
    return RealisationSummary(per_cell[0], per_cell[1], per_cell[2], per_cell[3], share_above, area_above,
                              per_realisation[0] / n_inside, n_inside * cell_area)
