"""Polygons (WKB in the working CRS) discretised into regular points for per-unit averages.

A polygon's average over its area is approximated by the mean over the centres of a regular square
lattice that fall inside it. The lattice spacing adapts to the polygon's size::

    spacing = sqrt(area / TARGET_POINTS)

so every polygon gets about :data:`TARGET_POINTS` points, whatever its size; a caller may fix the spacing
instead. Lattice centres sit at ``xmin + (i + 0.5) * spacing`` from the polygon's envelope. A point is
inside by the even-odd rule over every ring of every part, so holes are left out and the parts of a
multipolygon are all covered. A polygon too small or too thin for any lattice centre to fall inside gets
its centroid (a point on its surface when the centroid lies outside) and a flag.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from osgeo import ogr

from ..errors import FieldcastError
from .mask import quiet_gdal

TARGET_POINTS = 64
"""Discretisation points per polygon with the adaptive spacing (8 x 8 over a square unit, common practice
for block averages is 4 x 4 to 10 x 10)."""

MAX_POINTS = 400
"""Most discretisation points kept per polygon (a fixed fine spacing over a large unit is thinned evenly)."""


@dataclass(frozen=True)
class PolygonPoints:
    """One polygon's discretisation.

    Attributes
    ----------
    points : ndarray of shape (k, 2)
        Discretisation points (working CRS units).
    area : float
        Area of the polygon (CRS units squared).
    spacing : float
        Lattice spacing used (CRS units).
    centroid_only : bool
        True when no lattice centre fell inside and ``points`` is the single centroid.
    """

    points: np.ndarray
    area: float
    spacing: float
    centroid_only: bool


def polygon_geometry(wkb: bytes, what: str) -> ogr.Geometry:
    """A polygon or multipolygon geometry from WKB, refused with a message naming ``what`` otherwise."""
    with quiet_gdal():  # GDAL's exception mode is the host's (QGIS's) choice: read None as unreadable
        try:
            geometry = ogr.CreateGeometryFromWkb(bytes(wkb))
        except RuntimeError:
            geometry = None
    if geometry is None or geometry.IsEmpty():
        raise FieldcastError(f"{what} has no readable polygon geometry; fix or remove it (e.g. with 'Fix "
                             "geometries' or 'Remove null geometries').")
    flat = ogr.GT_Flatten(geometry.GetGeometryType())
    if flat not in (ogr.wkbPolygon, ogr.wkbMultiPolygon):
        raise FieldcastError(f"{what} is a {geometry.GetGeometryName().lower()}, not a polygon; choose a polygon "
                             "layer for AREAS.")
    return geometry


def polygon_rings(geometry: ogr.Geometry) -> list[np.ndarray]:
    """Every ring (outer and holes) of every part as an (r, 2) array of vertices."""
    parts = [geometry] if ogr.GT_Flatten(geometry.GetGeometryType()) == ogr.wkbPolygon else [
        geometry.GetGeometryRef(i) for i in range(geometry.GetGeometryCount())]
    rings = []
    for part in parts:
        for index in range(part.GetGeometryCount()):
            ring = part.GetGeometryRef(index)
            vertices = np.array(ring.GetPoints(), dtype=float).reshape(-1, ring.GetCoordinateDimension())[:, :2]
            if len(vertices) >= 3:
                rings.append(vertices)
    return rings


def inside(points: np.ndarray, rings: list[np.ndarray]) -> np.ndarray:
    """Even-odd point-in-polygon test over all ``rings`` (a horizontal ray to +x crosses an odd number of edges)."""
    x, y = points[:, 0][:, None], points[:, 1][:, None]
    odd = np.zeros(len(points), dtype=bool)
    for ring in rings:
        start, stop = ring, np.roll(ring, -1, axis=0)
        straddles = (start[:, 1] > y) != (stop[:, 1] > y)
        rise = np.where(stop[:, 1] != start[:, 1], stop[:, 1] - start[:, 1], 1.0)
        crossing = start[:, 0] + (y - start[:, 1]) * (stop[:, 0] - start[:, 0]) / rise
        odd ^= (np.count_nonzero(straddles & (x < crossing), axis=1) % 2).astype(bool)
    return odd


def discretise_polygon(wkb: bytes, spacing: float | None = None, *, what: str = "A polygon") -> PolygonPoints:
    """Regular discretisation points of one polygon (holes and multiparts respected).

    Parameters
    ----------
    wkb : bytes
        Polygon or multipolygon as WKB, already in the working (projected) CRS.
    spacing : float, optional
        Lattice spacing (CRS units); by default ``sqrt(area / TARGET_POINTS)``.
    what : str
        The polygon in words for a refusal (e.g. "Feature 12 of AREAS").

    Returns
    -------
    PolygonPoints
    """
    geometry = polygon_geometry(wkb, what)
    area = float(geometry.GetArea())
    if spacing is None:
        spacing = float(np.sqrt(area / TARGET_POINTS)) if area > 0 else 0.0
    xmin, xmax, ymin, ymax = geometry.GetEnvelope()
    points = np.empty((0, 2))
    if spacing > 0:
        xs = xmin + (np.arange(max(int(np.ceil((xmax - xmin) / spacing)), 1)) + 0.5) * spacing
        ys = ymin + (np.arange(max(int(np.ceil((ymax - ymin) / spacing)), 1)) + 0.5) * spacing
        lattice = np.column_stack([coordinate.ravel() for coordinate in np.meshgrid(xs, ys)])
        points = lattice[inside(lattice, polygon_rings(geometry))]
    if len(points):
        return PolygonPoints(points, area, float(spacing), False)
    centre = geometry.Centroid()
    if not geometry.Contains(centre):
        centre = geometry.PointOnSurface()
    return PolygonPoints(np.array([[centre.GetX(), centre.GetY()]]), area, float(spacing), True)
