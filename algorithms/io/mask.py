"""Which grid cells lie inside a set of polygons (for masking a predicted surface).

A cell is inside when its centre lies inside (or on the edge of) any of the
polygons; this is GDAL's default rasterisation rule (``ALL_TOUCHED=FALSE``),
so the mask matches what GDAL's own rasteriser gives for the same grid.
"""
from __future__ import annotations

from collections.abc import Iterator, Sequence
from contextlib import contextmanager

import numpy as np
from osgeo import gdal, ogr

from ..errors import FieldcastError
from .grid import GridSpec

POLYGON_TYPES = (ogr.wkbPolygon, ogr.wkbMultiPolygon, ogr.wkbCurvePolygon, ogr.wkbMultiSurface)


@contextmanager
def _quiet_gdal() -> Iterator[None]:
    """Keep GDAL from printing; failures are reported through FieldcastError instead."""
    gdal.PushErrorHandler("CPLQuietErrorHandler")
    try:
        yield
    finally:
        gdal.PopErrorHandler()


def _geometry(shape: bytes | str, position: int) -> ogr.Geometry:
    """An OGR geometry from WKB bytes or WKT text; FieldcastError when unreadable or not a polygon."""
    with _quiet_gdal():
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
    with _quiet_gdal():
        status = gdal.RasterizeLayer(raster, [1], layer, burn_values=[1])
    if status != 0:
        raise FieldcastError(f"GDAL could not rasterise the mask polygons: {gdal.GetLastErrorMsg()}.")
    return raster.GetRasterBand(1).ReadAsArray().astype(bool)
