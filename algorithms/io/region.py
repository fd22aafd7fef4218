"""A polygon region (where new samples may go) and its regular discretisation into points.

The polygons come as WKB bytes (or WKT text) in the working CRS. A lattice point is inside when it lies
inside (or on the edge of) the union of the polygons, by GDAL's rasterisation rule for cell centres (as
:func:`.mask.cell_mask`), so the points are the centres of the cells of a square grid that fall in the region.
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from osgeo import ogr

from ..errors import FieldcastError
from .grid import GridSpec
from .mask import POLYGON_TYPES, cell_mask, quiet_gdal


@dataclass(frozen=True)
class Region:
    """The union of one or more polygons (working CRS) with positive area.

    Attributes
    ----------
    shapes : tuple of bytes
        The polygons as WKB.
    area : float
        Area of their union (CRS units squared).
    bounds : tuple of float
        ``(x_min, y_min, x_max, y_max)`` of the union.
    """

    shapes: tuple[bytes, ...]
    area: float
    bounds: tuple[float, float, float, float]

    @classmethod
    def from_shapes(cls, shapes: Sequence[bytes | str], name: str = "REGION") -> Region:
        """The region of ``shapes``; FieldcastError naming ``name`` when there is none or it has no area."""
        if not shapes:
            raise FieldcastError(f"{name} holds no polygons (it is empty or every geometry is empty). Choose a "
                                 "polygon layer that outlines where new samples may go.")
        union = None
        for position, shape in enumerate(shapes):
            with quiet_gdal():
                geometry = (ogr.CreateGeometryFromWkb(bytes(shape)) if isinstance(shape, (bytes, bytearray))
                            else ogr.CreateGeometryFromWkt(str(shape)))
            if geometry is None or ogr.GT_Flatten(geometry.GetGeometryType()) not in POLYGON_TYPES:
                raise FieldcastError(f"Geometry {position + 1} of {name} is no readable polygon. Use a polygon "
                                     "layer, repaired first with 'Fix geometries' if needed.")
            with quiet_gdal():
                union = geometry if union is None else union.Union(geometry)
        area = 0.0 if union is None or union.IsEmpty() else float(union.GetArea())
        if not area > 0 or ogr.GT_Flatten(union.GetGeometryType()) not in POLYGON_TYPES:
            raise FieldcastError(f"The polygons of {name} have no area. Choose a polygon layer that outlines "
                                 "where new samples may go (repair it first with 'Fix geometries' if needed).")
        x_min, x_max, y_min, y_max = union.GetEnvelope()
        return cls((bytes(union.ExportToWkb()),), area, (x_min, y_min, x_max, y_max))

    def lattice(self, count: int) -> tuple[np.ndarray, float]:
        """About ``count`` points of a square lattice inside the region, and its spacing.

        The spacing is ``sqrt(area / count)``, lowered step by step (by 20 %) while fewer than ``count / 2``
        points fall inside (thin or ragged regions), and points sit at the centres of the cells of a lattice
        centred on the region's bounds.

        Returns
        -------
        xy : ndarray of shape (k, 2)
            Points inside, row by row from the north-west.
        spacing : float
            Distance between neighbouring points (CRS units).
        """
        x_min, y_min, x_max, y_max = self.bounds
        spacing = math.sqrt(self.area / max(int(count), 1))
        while True:
            n_cols = max(1, math.ceil((x_max - x_min) / spacing))
            n_rows = max(1, math.ceil((y_max - y_min) / spacing))
            left = x_min - (n_cols * spacing - (x_max - x_min)) / 2  # the lattice centred on the bounds
            top = y_max + (n_rows * spacing - (y_max - y_min)) / 2
            grid = GridSpec(left, top, spacing, n_cols, n_rows)
            inside = cell_mask(grid, self.shapes)
            if np.count_nonzero(inside) >= count / 2 or n_cols * n_rows > 16 * count:
                break
            spacing *= 0.8
        rows, cols = np.nonzero(inside)
        xy = np.column_stack([left + (cols + 0.5) * spacing, top - (rows + 0.5) * spacing])
        return xy, spacing

    def contains(self, xy: np.ndarray) -> np.ndarray:
        """Boolean (n,): True for the points inside the region or on its edge."""
        geometry = ogr.CreateGeometryFromWkb(self.shapes[0])
        inside = np.zeros(len(xy), dtype=bool)
        point = ogr.Geometry(ogr.wkbPoint)
        for row, (x, y) in enumerate(np.asarray(xy, dtype=float)):
            point.SetPoint_2D(0, float(x), float(y))
            inside[row] = geometry.Intersects(point)
        return inside
