"""A template raster: the user's own grid (CRS, corner, cell size and size) for the outputs, and its nodata cells.

The outputs of a run with a template have exactly the template's geotransform, size and CRS
(:meth:`.grid.GridSpec.from_geotransform`), so they overlay it cell for cell. Band 1 of the template tells
which cells hold a value (GDAL's mask band: its nodata value, a per-dataset mask or alpha band, and NaN
in a floating-point band); these cells may serve as the cell mask of the run.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from osgeo import gdal

from ..errors import Cancelled, FieldcastError
from .crs import defined_crs, to_wkt2
from .grid import GridSpec

BLOCK_CELLS = 4_000_000
"""Cells of the template read at a time when its nodata mask is made (whole rows; bounds the memory used)."""
FLOAT_TYPES = (gdal.GDT_Float32, gdal.GDT_Float64, gdal.GDT_CFloat32, gdal.GDT_CFloat64)


@dataclass(frozen=True)
class RasterTemplate:
    """The grid and CRS of a template raster.

    Attributes
    ----------
    path : str
        What GDAL opens (a file name, or a GDAL connection string such as ``GPKG:file.gpkg:table``).
    name : str
        How messages name it, e.g. ``"dem.tif (TEMPLATE)"``.
    grid : GridSpec
        Its grid, exactly (corner, square cell size, columns and rows).
    crs_wkt : str
        WKT2 of its CRS (a projected one).
    """

    path: str
    name: str
    grid: GridSpec
    crs_wkt: str

    @classmethod
    def read(cls, path: str, name: str, crs_wkt: str | None = None) -> RasterTemplate:
        """Open the raster at ``path`` and take its grid and CRS.

        Parameters
        ----------
        path : str
            The raster source GDAL opens.
        name : str
            How messages name the template.
        crs_wkt : str, optional
            Its CRS as the caller knows it (e.g. the CRS QGIS shows for the layer); empty or None = the CRS
            stored in the file.

        Raises
        ------
        FieldcastError
            If GDAL cannot open it, it has no CRS or one in degrees (kriging measures distances in a projected
            CRS), or its grid is rotated, not north-up or has cells that are not square.
        """
        dataset = open_raster(path, name)
        wkt = crs_wkt or dataset.GetProjection()
        crs = defined_crs(wkt, name)
        if crs.is_geographic:
            raise FieldcastError(f"{name} is in {crs.name!r}, a CRS in degrees; kriging measures distances in a "
                                 "projected CRS (metres or feet). Warp the template to a projected CRS first (Raster "
                                 "> Projections > Warp (reproject), e.g. to the local UTM zone or national grid), or "
                                 "leave TEMPLATE empty and use EXTENT and PIXEL_SIZE.")
        grid = GridSpec.from_geotransform(dataset.GetGeoTransform(), dataset.RasterXSize, dataset.RasterYSize,
                                          name)
        return cls(path, name, grid, to_wkt2(crs))

    def valid_cells(self, should_stop: Callable[[], bool] | None = None) -> np.ndarray | None:
        """Which cells of band 1 hold a value: ``(n_rows, n_cols)`` booleans, None when every cell does.

        A cell is nodata where GDAL's mask band of band 1 is 0 (nodata value, mask or alpha band) or, in a
        floating-point band, where the value is NaN. Read in blocks of whole rows.

        Raises
        ------
        FieldcastError
            If every cell is nodata (the mask would keep none), or GDAL cannot read the raster.
        Cancelled
            When ``should_stop()`` turns true between blocks.
        """
        dataset = open_raster(self.path, self.name)  # kept referenced: GDAL frees a band with its dataset
        band = dataset.GetRasterBand(1)
        floating = band.DataType in FLOAT_TYPES
        if band.GetMaskFlags() == gdal.GMF_ALL_VALID and not floating:
            return None
        grid = self.grid
        valid = np.empty((grid.n_rows, grid.n_cols), dtype=bool)
        step = max(1, BLOCK_CELLS // grid.n_cols)
        for start in range(0, grid.n_rows, step):
            if should_stop is not None and should_stop():
                raise Cancelled("Cancelled while reading the template's nodata cells.")
            rows = min(step, grid.n_rows - start)
            mask = band.GetMaskBand().ReadAsArray(0, start, grid.n_cols, rows)
            if mask is None:
                raise FieldcastError(f"GDAL could not read {self.name}: {gdal.GetLastErrorMsg()}. Check the file, "
                                     "or leave TEMPLATE empty.")
            valid[start:start + rows] = mask != 0
            if floating:
                valid[start:start + rows] &= np.isfinite(band.ReadAsArray(0, start, grid.n_cols, rows))
        if not valid.any():
            raise FieldcastError(f"Every cell of {self.name} is nodata, so as a mask it keeps no cell. Set "
                                 "TEMPLATE_NODATA_MASK to false to use only its grid, or choose a template with "
                                 "values where the map is wanted.")
        return None if valid.all() else valid


def open_raster(path: str, name: str, role: str = "as template (TEMPLATE)") -> gdal.Dataset:
    """The GDAL dataset at ``path``; FieldcastError naming ``name`` when GDAL cannot open it, whose advice says to
    choose a raster file ``role`` (e.g. ``"in COVARIATES or CLASS_COVARIATES"``)."""
    gdal.PushErrorHandler("CPLQuietErrorHandler")
    try:
        dataset = gdal.Open(path) if path else None
    finally:
        gdal.PopErrorHandler()
    if dataset is None or dataset.RasterCount < 1:
        raise FieldcastError(f"GDAL cannot open {name} as a raster ({path!r}). Choose a raster file layer "
                             f"{role} (e.g. a GeoTIFF; save other layers with Export > Save As first).")
    return dataset
