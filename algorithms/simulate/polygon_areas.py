"""Per polygon and per realisation: the area (and volume) of a simulated grid above a threshold.

A cell belongs to a polygon when its centre lies inside it (even-odd rule over every ring of every part,
:func:`..io.polygons.inside`, so holes are left out and every part counts); cells outside the mask or
without a value in a realisation are left out. The area above the threshold in realisation ``r`` is
``cell_area * #{cells of the polygon with Z_r > t}``, its volume that area times the polygon's depth.
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..errors import FieldcastError
from ..io.grid import GridSpec
from ..io.polygons import inside, polygon_geometry, polygon_rings


@dataclass(frozen=True)
class PolygonAreas:
    """Areas above a threshold per polygon (rows) and realisation (columns), CRS units squared.

    Attributes
    ----------
    cells : ndarray of int, shape (P,)
        Cells of the grid (inside the mask) whose centre lies in each polygon.
    area_above : ndarray of shape (P, R)
        Area above the threshold; NaN for a polygon holding no cell.
    volume_above : ndarray of shape (P, R)
        ``area_above`` times the polygon's depth; NaN without a depth.
    """

    cells: np.ndarray
    area_above: np.ndarray
    volume_above: np.ndarray


def polygon_areas_above(realisations: np.ndarray, grid: GridSpec, polygons: Sequence[bytes], threshold: float, *,
                        depths: np.ndarray | float | None = None, mask: np.ndarray | None = None) -> PolygonAreas:
    """Area and volume above ``threshold`` in each polygon for each realisation (R, n_rows, n_cols), attribute units.

    ``polygons`` are WKB in the grid's CRS; ``depths`` one per polygon (or one for all; NaN = none).
    """
    if not np.isfinite(threshold):
        raise FieldcastError("Areas above a threshold per polygon need a THRESHOLD.")
    stack = np.asarray(realisations, dtype=float).reshape(len(realisations), -1)
    centres = grid.cell_centres(0, grid.n_rows)
    usable = np.ones(len(centres), dtype=bool) if mask is None else np.asarray(mask, dtype=bool).ravel()
    usable &= np.all(np.isfinite(stack), axis=0)
    depth = np.broadcast_to(np.asarray(np.nan if depths is None else depths, dtype=float), (len(polygons),))
    cells = np.zeros(len(polygons), dtype=int)
    area = np.full((len(polygons), len(stack)), np.nan)
    for index, wkb in enumerate(polygons):
        geometry = polygon_geometry(wkb, f"Polygon {index + 1} of AREAS")
        xmin, xmax, ymin, ymax = geometry.GetEnvelope()
        near = np.flatnonzero(usable & (centres[:, 0] >= xmin) & (centres[:, 0] <= xmax)
                              & (centres[:, 1] >= ymin) & (centres[:, 1] <= ymax))
        members = near[inside(centres[near], polygon_rings(geometry))]
        cells[index] = len(members)
        if len(members):
            area[index] = np.count_nonzero(stack[:, members] > threshold, axis=1) * grid.pixel_size ** 2
    return PolygonAreas(cells, area, area * depth[:, None])
