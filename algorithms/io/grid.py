"""The output raster grid: a north-up lattice of square cells in a projected CRS.

A :class:`GridSpec` is given by its top-left corner ``(x_min, y_max)``, the cell
width ``pixel_size`` (CRS units) and the numbers of columns and rows. Cell
``(row, col)`` (both from 0, rows counted downwards from the top) has its centre at::

    x = x_min + (col + 0.5) * pixel_size
    y = y_max - (row + 0.5) * pixel_size

which is the GDAL geotransform ``(x_min, pixel_size, 0, y_max, 0, -pixel_size)``.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from ..errors import FieldcastError, FieldcastUsageError

READABLE_MANTISSAS = (1.0, 2.0, 2.5, 5.0, 10.0)
SNAP_TOLERANCE = 1e-9  # relative; absorbs float noise so 3.0000000001 cells snap to 3
EXTENT_REACH = 10.0
"""Largest ratio of an output extent's diagonal to the diagonal of the samples' bounding box. Farther than a few
ranges from every sample kriging gives the mean and the sill, so a wider extent is almost all such cells (and
hours of work)."""
DEFAULT_MAX_CELLS = 1_000_000
"""Most cells of a grid whose pixel size is derived from the sample spacing (PIXEL_SIZE empty)."""


def readable_floor(value: float) -> float:
    """Largest number of the form m * 10**k with m in {1, 2, 2.5, 5} that is <= ``value`` (> 0)."""
    scale = 10.0 ** math.floor(math.log10(value))
    mantissa = max(m for m in READABLE_MANTISSAS if m <= value / scale * (1 + SNAP_TOLERANCE))
    return mantissa * scale


def readable_ceil(value: float) -> float:
    """Smallest number of the form m * 10**k with m in {1, 2, 2.5, 5} that is >= ``value`` (> 0)."""
    scale = 10.0 ** math.floor(math.log10(value))
    mantissa = min(m for m in READABLE_MANTISSAS if m >= value / scale * (1 - SNAP_TOLERANCE))
    return mantissa * scale


def snapped_index(offset: float, pixel_size: float, upward: bool) -> int:
    """``floor`` (or ``ceil`` if ``upward``) of ``offset / pixel_size``, ignoring float noise."""
    ratio = offset / pixel_size
    nearest = round(ratio)
    if abs(ratio - nearest) <= SNAP_TOLERANCE * max(1.0, abs(ratio)):
        return int(nearest)
    return int(math.ceil(ratio) if upward else math.floor(ratio))


def check_pixel_size(pixel_size: float) -> None:
    """Raise :class:`FieldcastError` unless ``pixel_size`` is a finite number > 0."""
    if not (math.isfinite(pixel_size) and pixel_size > 0):
        raise FieldcastError(f"The pixel size must be a positive number of CRS units, got {pixel_size}. "
                             "Enter a pixel size larger than zero.")


def format_bytes(n_bytes: float) -> str:
    """``n_bytes`` as a short human-readable size, e.g. ``"1.5 GB"`` (powers of 1000)."""
    for unit, size in (("TB", 1e12), ("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if n_bytes >= size:
            return f"{n_bytes / size:.1f} {unit}"
    return f"{int(n_bytes)} bytes"


@dataclass(frozen=True)
class GridSpec:
    """A north-up raster grid of square cells.

    Attributes
    ----------
    x_min, y_max : float
        Left and top edges of the grid (CRS units).
    pixel_size : float
        Cell width and height (CRS units), > 0.
    n_cols, n_rows : int
        Number of columns and rows, >= 1.
    """

    x_min: float
    y_max: float
    pixel_size: float
    n_cols: int
    n_rows: int

    def __post_init__(self) -> None:
        if not (math.isfinite(self.x_min) and math.isfinite(self.y_max)):
            raise FieldcastError(f"The grid corner ({self.x_min}, {self.y_max}) is not finite. "
                                 "Give the extent as finite coordinates.")
        check_pixel_size(self.pixel_size)
        for name in ("n_cols", "n_rows"):
            count = getattr(self, name)
            if int(count) != count or count < 1:
                raise FieldcastError(f"The grid needs at least one whole column and row, got {name}={count}.")

    @classmethod
    def from_extent(cls, x_min: float, y_min: float, x_max: float, y_max: float, pixel_size: float,
                    align_to: tuple[float, float] | None = None) -> GridSpec:
        """Smallest grid of ``pixel_size`` cells covering an extent, edges snapped outwards.

        Edges snap to ``align_to + k * pixel_size`` for whole ``k``; with ``align_to=None``
        they snap to multiples of ``pixel_size`` (origin ``(0, 0)``).

        Raises
        ------
        FieldcastError
            If the pixel size is not positive, or the extent is not finite or has zero or
            negative width or height.
        """
        check_pixel_size(pixel_size)
        if not all(math.isfinite(v) for v in (x_min, y_min, x_max, y_max)):
            raise FieldcastError(f"The extent ({x_min}, {y_min}, {x_max}, {y_max}) is not finite. "
                                 "Choose an extent with finite coordinates.")
        if not (x_max > x_min and y_max > y_min):
            raise FieldcastError(f"The extent ({x_min}, {y_min}, {x_max}, {y_max}) has zero or negative "
                                 f"width ({x_max - x_min}) or height ({y_max - y_min}). Choose an extent "
                                 "with x_max > x_min and y_max > y_min, e.g. the samples' extent plus a "
                                 "buffer.")
        x0, y0 = (0.0, 0.0) if align_to is None else (float(align_to[0]), float(align_to[1]))
        left = snapped_index(x_min - x0, pixel_size, upward=False)
        right = snapped_index(x_max - x0, pixel_size, upward=True)
        bottom = snapped_index(y_min - y0, pixel_size, upward=False)
        top = snapped_index(y_max - y0, pixel_size, upward=True)
        return cls(x_min=x0 + left * pixel_size, y_max=y0 + top * pixel_size, pixel_size=float(pixel_size),
                   n_cols=right - left, n_rows=top - bottom)

    @classmethod
    def from_geotransform(cls, geotransform: tuple[float, float, float, float, float, float], n_cols: int,
                          n_rows: int, name: str = "The raster") -> GridSpec:
        """The grid of a raster with GDAL geotransform ``geotransform`` and ``n_cols`` x ``n_rows`` cells, exactly.

        The corner, cell size and size are taken as they are (no snapping), so a raster written on the grid
        has the same geotransform. ``name`` opens the messages (e.g. ``"The template raster x.tif (TEMPLATE)"``).

        Raises
        ------
        FieldcastError
            For a rotated or sheared geotransform, one that is not north-up (rows counted upwards), or
            cells that are not square (width and height differing by more than :data:`SNAP_TOLERANCE`
            relative): the grid holds north-up square cells only.
        """
        x_min, width, row_rotation, y_max, column_rotation, height = (float(v) for v in geotransform)
        check_pixel_size(width)
        if abs(row_rotation) > SNAP_TOLERANCE * width or abs(column_rotation) > SNAP_TOLERANCE * width:
            raise FieldcastError(f"{name} is rotated or sheared (geotransform {tuple(geotransform)}); Fieldcast "
                                 "writes north-up grids only. Warp it to a north-up raster first (Raster > "
                                 "Projections > Warp (reproject)), or use EXTENT and PIXEL_SIZE instead.")
        if height >= 0:
            raise FieldcastError(f"{name} is not north-up: its rows run from south to north (cell height "
                                 f"{height:g}). Warp it to a north-up raster first (Raster > Projections > Warp "
                                 "(reproject)), or use EXTENT and PIXEL_SIZE instead.")
        if abs(width + height) > SNAP_TOLERANCE * width:
            raise FieldcastError(f"{name} has cells of {width:g} x {-height:g} CRS units; Fieldcast needs square "
                                 "cells. Resample it to square cells first (Raster > Projections > Warp (reproject) "
                                 "with one output resolution for both axes), or use EXTENT and PIXEL_SIZE instead.")
        return cls(x_min=x_min, y_max=y_max, pixel_size=width, n_cols=n_cols, n_rows=n_rows)

    @property
    def n_cells(self) -> int:
        """Number of cells, ``n_cols * n_rows``."""
        return self.n_cols * self.n_rows

    @property
    def geotransform(self) -> tuple[float, float, float, float, float, float]:
        """GDAL geotransform of the north-up grid: ``(x_min, pixel_size, 0, y_max, 0, -pixel_size)``."""
        return (self.x_min, self.pixel_size, 0.0, self.y_max, 0.0, -self.pixel_size)

    @property
    def extent(self) -> tuple[float, float, float, float]:
        """Outer edges ``(x_min, y_min, x_max, y_max)`` in CRS units."""
        return (self.x_min, self.y_max - self.n_rows * self.pixel_size,
                self.x_min + self.n_cols * self.pixel_size, self.y_max)

    def cell_centres(self, row_start: int = 0, row_stop: int | None = None) -> np.ndarray:
        """Centres of the cells in rows ``row_start`` to ``row_stop - 1``, in raster order.

        Returns
        -------
        ndarray of shape ((row_stop - row_start) * n_cols, 2)
            Row by row from the top, left to right within a row; a prediction for these
            points reshapes to ``(row_stop - row_start, n_cols)``.
        """
        row_stop = self.n_rows if row_stop is None else row_stop
        if not 0 <= row_start <= row_stop <= self.n_rows:
            raise FieldcastUsageError(f"rows {row_start}..{row_stop} are outside 0..{self.n_rows}")
        xs = self.x_min + (np.arange(self.n_cols) + 0.5) * self.pixel_size
        ys = self.y_max - (np.arange(row_start, row_stop) + 0.5) * self.pixel_size
        grid_x, grid_y = np.meshgrid(xs, ys)
        return np.column_stack([grid_x.ravel(), grid_y.ravel()])

    def estimated_bytes(self, n_bands: int, dtype_bytes: int = 4) -> int:
        """Size of ``n_bands`` full-grid arrays of ``dtype_bytes``-byte values."""
        return self.n_cells * n_bands * dtype_bytes

    def check_memory(self, limit_bytes: float, n_bands: int = 1, dtype_bytes: int = 4) -> None:
        """Raise if ``n_bands`` arrays over the grid would need more than ``limit_bytes``.

        Raises
        ------
        FieldcastError
            Stating the grid size and the smallest readable pixel size that fits.
        """
        needed = self.estimated_bytes(n_bands, dtype_bytes)
        if needed <= limit_bytes:
            return
        fitting_pixel = readable_ceil(self.pixel_size * math.sqrt(needed / limit_bytes))
        raise FieldcastError(
            f"The output grid has {self.n_cols:,} x {self.n_rows:,} cells ({self.n_cells:,}) x {n_bands} "
            f"band(s) = {format_bytes(needed)}, more than the {format_bytes(limit_bytes)} allowed. "
            f"Use a larger pixel size (at least {fitting_pixel:g} instead of {self.pixel_size:g}) "
            "or a smaller extent.")

    def overlaps(self, xy: np.ndarray) -> bool:
        """True when the grid extent and the bounding box of the finite points ``xy`` (n, 2) intersect."""
        points = np.asarray(xy, dtype=float)
        points = points[np.all(np.isfinite(points), axis=1)]
        if len(points) == 0:
            return False
        x_min, y_min, x_max, y_max = self.extent
        low, high = points.min(axis=0), points.max(axis=0)
        return bool(low[0] <= x_max and high[0] >= x_min and low[1] <= y_max and high[1] >= y_min)


def default_pixel_size(xy: np.ndarray, extent: tuple[float, float, float, float],
                       max_cells: int = DEFAULT_MAX_CELLS) -> float:
    """A readable pixel size derived from the sample spacing.

    Half the median nearest-neighbour distance between distinct sample locations
    (common practice: cells finer than the sample spacing, so the map shows the
    structure the samples resolve), rounded down to ``m * 10**k`` with m in
    {1, 2, 2.5, 5}; then raised to the next readable value until the grid over
    ``extent`` (``x_min, y_min, x_max, y_max``) has at most ``max_cells`` cells.

    Raises
    ------
    FieldcastError
        If there are fewer than two distinct finite sample locations.
    """
    points = np.asarray(xy, dtype=float)
    points = np.unique(points[np.all(np.isfinite(points), axis=1)], axis=0)
    if len(points) < 2:
        raise FieldcastError("The pixel size cannot be derived from fewer than two distinct sample "
                             "locations. Enter a pixel size explicitly.")
    if max_cells < 1:
        raise FieldcastError(f"The maximum number of cells must be at least 1, got {max_cells}.")
    distances, _ = cKDTree(points).query(points, k=2)
    pixel = readable_floor(float(np.median(distances[:, 1])) / 2.0)
    x_min, y_min, x_max, y_max = extent
    area = (x_max - x_min) * (y_max - y_min)
    if area > 0:  # a degenerate extent is rejected with advice by GridSpec.from_extent below
        pixel = max(pixel, readable_ceil(math.sqrt(area / max_cells)))
    while GridSpec.from_extent(x_min, y_min, x_max, y_max, pixel).n_cells > max_cells:
        pixel = readable_ceil(pixel * (1 + 1e-6))
    return pixel


def check_extent_reach(extent: tuple[float, float, float, float], xy: np.ndarray, units: str = "CRS unit",
                       reach: float = EXTENT_REACH) -> None:
    """Refuse an extent whose diagonal is more than ``reach`` times that of the samples' bounding box.

    Parameters
    ----------
    extent : tuple of float
        ``x_min, y_min, x_max, y_max`` of the output grid (CRS units).
    xy : ndarray of shape (n, 2)
        Sample locations (CRS units); at least two distinct ones.
    units : str
        Name of the CRS unit for the message (e.g. ``"metre"``).
    reach : float
        Largest ratio accepted (:data:`EXTENT_REACH`).

    Raises
    ------
    FieldcastError
        Giving both diagonals and the largest extent diagonal accepted.
    """
    points = np.asarray(xy, dtype=float)
    span = float(np.hypot(*(points.max(axis=0) - points.min(axis=0))))
    x_min, y_min, x_max, y_max = extent
    diagonal = math.hypot(x_max - x_min, y_max - y_min)
    if span > 0 and diagonal > reach * span:
        raise FieldcastError(
            f"The extent is {diagonal:.6g} {units}s across (diagonal), {diagonal / span:.3g} times the "
            f"{span:.6g} {units}s the samples span: most cells would lie far beyond the samples, where kriging "
            f"only repeats the mean, and the run would take very long. Choose an extent at most {reach:g} times "
            f"the samples' (a diagonal up to {reach * span:.6g} {units}s), or leave EXTENT empty to use the "
            "samples' extent."
        )


def output_grid(xy: np.ndarray, extent: tuple[float, float, float, float] | None = None,
                pixel_size: float | None = None, units: str = "CRS unit",
                max_cells: int = DEFAULT_MAX_CELLS) -> GridSpec:
    """The output grid of a raster run (predict, predictmany, simulate) from EXTENT and PIXEL_SIZE.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations (working CRS units).
    extent : tuple of float, optional
        ``x_min, y_min, x_max, y_max`` as chosen (checked by :func:`check_extent_reach`); None = the samples'
        bounding box.
    pixel_size : float, optional
        Cell width as chosen; None = :func:`default_pixel_size` with at most ``max_cells`` cells.
    units : str
        Name of the working CRS unit, for the messages.

    Raises
    ------
    FieldcastError
        For an extent too wide for the samples or not overlapping them, or a pixel size that cannot be used.
    """
    if extent is None:
        low, high = np.asarray(xy, dtype=float).min(axis=0), np.asarray(xy, dtype=float).max(axis=0)
        extent = (float(low[0]), float(low[1]), float(high[0]), float(high[1]))
    else:
        check_extent_reach(extent, xy, units)
    if pixel_size is None:
        pixel_size = default_pixel_size(xy, extent, max_cells=max_cells)
    grid = GridSpec.from_extent(*extent, pixel_size)
    if not grid.overlaps(xy):
        raise FieldcastError(f"The extent {', '.join(f'{v:.10g}' for v in extent)} does not overlap the "
                             "samples. Choose an extent that covers (part of) the sample layer, or leave it "
                             "empty to use the samples' extent.")
    return grid
