"""Which grid cells lie inside a set of polygons, or near the samples (for masking a predicted surface).

A cell is inside when its centre lies inside (or on the edge of) any of the
polygons; this is GDAL's default rasterisation rule (``ALL_TOUCHED=FALSE``),
so the mask matches what GDAL's own rasteriser gives for the same grid.
:func:`hull_mask` applies the rule to the samples' convex hull grown by a margin.
"""
from __future__ import annotations

from collections.abc import Iterator, Sequence
from contextlib import contextmanager

import numpy as np
from osgeo import gdal, ogr
from scipy.spatial import cKDTree

from ..errors import FieldcastError
from .grid import GridSpec

POLYGON_TYPES = (ogr.wkbPolygon, ogr.wkbMultiPolygon, ogr.wkbCurvePolygon, ogr.wkbMultiSurface)
ARC_SEGMENTS = 32
"""Straight segments per quarter circle of the grown hull's rounded corners (GDAL's buffer); the polygon lies
inside the exact one by at most ``margin * (1 - cos(pi / 128))``, 0.03 % of the margin."""


@contextmanager
def quiet_gdal() -> Iterator[None]:
    """Keep GDAL from printing; failures are reported through FieldcastError instead."""
    gdal.PushErrorHandler("CPLQuietErrorHandler")
    try:
        yield
    finally:
        gdal.PopErrorHandler()


def _geometry(shape: bytes | str, position: int) -> ogr.Geometry:
    """An OGR geometry from WKB bytes or WKT text; FieldcastError when unreadable or not a polygon."""
    with quiet_gdal():
        if isinstance(shape, (bytes, bytearray, memoryview)):
            geometry = ogr.CreateGeometryFromWkb(bytes(shape))
        else:
            geometry = ogr.CreateGeometryFromWkt(str(shape))
    if geometry is None:
        raise FieldcastError(f"Mask geometry {position + 1} cannot be read; repair the mask layer "
                             "(e.g. with 'Fix geometries') and run again.")
    if ogr.GT_Flatten(geometry.GetGeometryType()) not in POLYGON_TYPES:
        raise FieldcastError(f"Mask geometry {position + 1} is a {geometry.GetGeometryName()}, not a polygon. "
                             "Use a polygon layer as the mask.")
    return geometry


def cell_mask(grid: GridSpec, geometries: Sequence[bytes | str]) -> np.ndarray:
    """Boolean array (n_rows, n_cols): True where the cell centre is inside a polygon.

    Parameters
    ----------
    grid : GridSpec
        The output grid; geometries must be in the same CRS.
    geometries : sequence of bytes or str
        Polygons or multipolygons as WKB bytes or WKT text. The inputs are
        not modified.

    Raises
    ------
    FieldcastError
        If a geometry is unreadable or not a polygon.
    """
    shapes = [_geometry(shape, i) for i, shape in enumerate(geometries)]
    raster = gdal.GetDriverByName("MEM").Create("", grid.n_cols, grid.n_rows, 1, gdal.GDT_Byte)
    raster.SetGeoTransform(grid.geotransform)
    vectors = ogr.GetDriverByName("Memory").CreateDataSource("mask")
    layer = vectors.CreateLayer("mask", geom_type=ogr.wkbUnknown)
    for shape in shapes:
        feature = ogr.Feature(layer.GetLayerDefn())
        feature.SetGeometry(shape)
        layer.CreateFeature(feature)
    # Neither side carries a CRS (the caller guarantees they match), which GDAL would warn about.
    with quiet_gdal():
        status = gdal.RasterizeLayer(raster, [1], layer, burn_values=[1])
    if status != 0:
        raise FieldcastError(f"GDAL could not rasterise the mask polygons: {gdal.GetLastErrorMsg()}.")
    return raster.GetRasterBand(1).ReadAsArray().astype(bool)


def median_spacing(xy: np.ndarray) -> float:
    """Median distance from each distinct sample location to its nearest neighbour (CRS units; 0 for one location)."""
    points = np.unique(np.asarray(xy, dtype=float), axis=0)
    if len(points) < 2:
        return 0.0
    return float(np.median(cKDTree(points).query(points, k=2)[0][:, 1]))


def hull_mask(grid: GridSpec, xy: np.ndarray, margin: float | None = None) -> tuple[np.ndarray, float]:
    """Boolean array (n_rows, n_cols): True where the cell centre lies within ``margin`` of the samples' convex hull.

    Parameters
    ----------
    grid : GridSpec
        The output grid, in the CRS of ``xy``.
    xy : ndarray of shape (n, 2)
        Sample locations (CRS units).
    margin : float, optional
        How far the hull is grown (CRS units, >= 0); None = :func:`median_spacing` of the samples
        (our choice: a rim one typical sample spacing wide is about as close to a sample as the cells
        between samples are).

    Returns
    -------
    mask : ndarray of bool, shape (n_rows, n_cols)
    margin : float
        The margin used.

    Raises
    ------
    FieldcastError
        If the margin is negative or not finite, or the grown hull has no area (samples at one place or
        on one line with margin 0).
    """
    margin = median_spacing(xy) if margin is None else float(margin)
    if not (np.isfinite(margin) and margin >= 0):
        raise FieldcastError(f"HULL_MARGIN is {margin:g}; give a distance of 0 or more in working CRS units.")
    points = ogr.Geometry(ogr.wkbMultiPoint)
    for x, y in np.asarray(xy, dtype=float):
        point = ogr.Geometry(ogr.wkbPoint)
        point.AddPoint_2D(float(x), float(y))
        points.AddGeometry(point)
    with quiet_gdal():
        area = points.ConvexHull()
        if margin > 0:
            area = area.Buffer(margin, ARC_SEGMENTS)
    if area is None or area.IsEmpty() or ogr.GT_Flatten(area.GetGeometryType()) not in POLYGON_TYPES:
        raise FieldcastError("The samples lie at one place or on one line, so their convex hull has no area. Give "
                             "HULL_MARGIN a positive distance, or set MAP_AREA to extent.")
    return cell_mask(grid, [area.ExportToWkb()]), margin


def hull_map_area(grid: GridSpec, xy: np.ndarray, margin: float | None, units: str,
                  inside: np.ndarray | None = None) -> tuple[np.ndarray, str]:
    """The cells MAP_AREA hull keeps: :func:`hull_mask`, within ``inside`` (another mask, e.g. MASK) when given,
    and the log line that says how many.

    Raises
    ------
    FieldcastError
        When no cell is kept (besides :func:`hull_mask`'s refusals).
    """
    near, margin = hull_mask(grid, xy, margin)
    kept = near if inside is None else near & inside
    if not kept.any():
        raise FieldcastError(f"No cell centre lies within {margin:g} {units} of the samples' convex hull"
                             f"{' and inside the mask' if inside is not None else ''}. Enlarge HULL_MARGIN, "
                             "or set MAP_AREA to extent to map every cell.")
    return kept, (f"Map area: {int(kept.sum()):,} of {grid.n_cells:,} cells lie within {margin:.4g} {units} of the "
                  "samples' convex hull (MAP_AREA hull, HULL_MARGIN); the others are nodata. Set MAP_AREA to extent "
                  "to map every cell.")


def checked_cell_mask(grid: GridSpec, geometries: Sequence[bytes | str], layer_name: str = "layer",
                      units: str = "CRS unit") -> np.ndarray:
    """:func:`cell_mask`, refusing a mask that leaves no cell and saying why.

    Parameters
    ----------
    grid : GridSpec
        The output grid.
    geometries : sequence of bytes or str
        The mask polygons in the grid's CRS (empty geometries already left out).
    layer_name : str
        How messages name the mask layer.
    units : str
        Name of the CRS unit, for the message.

    Raises
    ------
    FieldcastError
        When there are no polygons, when they lie outside the grid (their bounding box is given), or when
        they are too small to hold a cell centre.
    """
    if not geometries:
        raise FieldcastError(f"The mask {layer_name} holds no polygons (it is empty or every geometry is empty). "
                             "Choose a polygon layer with the area to keep as MASK, or leave MASK empty.")
    inside = cell_mask(grid, geometries)
    if inside.any():
        return inside
    boxes = np.array([_geometry(shape, i).GetEnvelope() for i, shape in enumerate(geometries)])  # x0, x1, y0, y1
    x_min, y_min, x_max, y_max = grid.extent
    box = (boxes[:, 0].min(), boxes[:, 2].min(), boxes[:, 1].max(), boxes[:, 3].max())
    shown = ", ".join(f"{v:.10g}" for v in box)
    if box[0] > x_max or box[2] < x_min or box[1] > y_max or box[3] < y_min:
        raise FieldcastError(f"The mask {layer_name} lies outside the grid: its polygons span {shown} (x_min, "
                             f"y_min, x_max, y_max in the working CRS), the grid {x_min:.10g}, {y_min:.10g}, "
                             f"{x_max:.10g}, {y_max:.10g}. Check that the mask layer has its real CRS, or choose a "
                             "mask (or EXTENT) that covers the area to map.")
    raise FieldcastError(f"The mask {layer_name} overlaps the grid but holds no cell centre: its polygons are "
                         f"narrower than the {grid.pixel_size:g} {units} cells. Use a smaller PIXEL_SIZE, or "
                         "a larger mask.")
