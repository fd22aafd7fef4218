"""What the raster-writing algorithms (predict, simulate) share: extent, pixel size, mask, threshold, GeoTIFF outputs.

:class:`RasterAlgorithm` adds to :class:`.algorithm_base.FieldcastAlgorithm` the
parameters that define the output grid and the threshold of the decision maps,
and turns them into an engine :class:`GridSpec`, a cell mask and a threshold.
"""
from __future__ import annotations

import math

import numpy as np
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsFeatureRequest,
    QgsProcessing,
    QgsProcessingParameterExtent,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterNumber,
)

from ..algorithms import (
    FieldcastError,
    GridSpec,
    check_extent_reach,
    checked_cell_mask,
    default_pixel_size,
    defined_crs,
)
from .algorithm_base import FieldcastAlgorithm
from .sample_reader import crs_wkt

MAX_DEFAULT_CELLS = 1_000_000
"""Cap on the number of cells of a grid whose pixel size is chosen automatically."""
MEMORY_LIMIT_BYTES = 2e9
"""Largest total size of the Float32 output bands accepted (a grid that large takes hours to krige)."""
GEOTIFF_EXTENSIONS = (".tif", ".tiff")


def geotiff_path(path: str) -> str:
    """``path`` if it names a GeoTIFF (or is empty); FieldcastError otherwise."""
    if path and not path.lower().endswith(GEOTIFF_EXTENSIONS):
        raise FieldcastError(f"Fieldcast writes GeoTIFF files; {path} does not end in .tif. Give a file name "
                             "ending in .tif.")
    return path


class RasterAlgorithm(FieldcastAlgorithm):
    """Base of the algorithms that write rasters on a grid chosen by EXTENT, PIXEL_SIZE and MASK."""

    EXTENT = "EXTENT"
    PIXEL_SIZE = "PIXEL_SIZE"
    MASK = "MASK"
    OUTPUT_EXCEEDANCE = "OUTPUT_EXCEEDANCE"

    def add_grid_parameters(self) -> None:
        """EXTENT, PIXEL_SIZE and MASK, all optional."""
        self.addParameter(QgsProcessingParameterExtent(self.EXTENT, self.tr("Extent (empty = samples)"),
                                                       optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            self.PIXEL_SIZE, self.tr("Pixel size (working CRS units; empty = from sample spacing)"),
            type=QgsProcessingParameterNumber.Double, optional=True, minValue=0.0))
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.MASK, self.tr("Mask polygons"), [QgsProcessing.TypeVectorPolygon], optional=True))

    def raster_destination(self, parameters, name: str, context) -> str:
        """Path of a GeoTIFF destination parameter, "" when skipped; FieldcastError for other formats."""
        return geotiff_path(self.parameterAsOutputLayer(parameters, name, context) or "")

    def exceedance_destination(self, parameters, context, threshold_needs_output: bool = False
                               ) -> tuple[str, float | None]:
        """OUTPUT_EXCEEDANCE ("" when skipped) and THRESHOLD (None when empty), checked together.

        ``threshold_needs_output``: the exceedance raster is the threshold's only use (predict), so a
        threshold without it would be ignored.

        Raises
        ------
        FieldcastError
            If an exceedance raster is asked for without a threshold, or (``threshold_needs_output``) a
            threshold without an exceedance raster.
        """
        path = self.raster_destination(parameters, self.OUTPUT_EXCEEDANCE, context)
        threshold = self.optional_number(parameters, self.THRESHOLD, context)
        if path and threshold is None:
            raise FieldcastError("The exceedance raster needs a threshold: set 'Threshold' (THRESHOLD, in the "
                                 "attribute's units, e.g. 500 for 500 ppm), or leave the exceedance output empty.")
        if threshold_needs_output and threshold is not None and not path:
            raise FieldcastError(f"A threshold ({threshold:g}) is set but no exceedance raster is asked for, so it "
                                 "would be ignored. Give the exceedance output (OUTPUT_EXCEEDANCE) a file name, or "
                                 "leave 'Threshold' (THRESHOLD) empty.")
        return path, threshold

    def checkParameterValues(self, parameters, context):
        """Refuse a PIXEL_SIZE of 0 or less with our advice (before Processing's generic range message)."""
        if parameters.get(self.PIXEL_SIZE) not in (None, ""):
            size = self.parameterAsDouble(parameters, self.PIXEL_SIZE, context)
            if not (math.isfinite(size) and size > 0):
                return False, (f"The pixel size (PIXEL_SIZE) must be a positive distance in the working CRS's "
                               f"units (e.g. metres); got {parameters[self.PIXEL_SIZE]!r}. Give a size above 0, "
                               "or leave it empty to derive it from the sample spacing.")
        return super().checkParameterValues(parameters, context)

    def grid_and_mask(self, parameters, context, xy: np.ndarray, crs_wkt: str, units: str, feedback,
                      n_bands: int) -> tuple[GridSpec, np.ndarray | None]:
        """The output grid (checked to fit ``n_bands`` Float32 bands in memory) and its cell mask, logged."""
        working_crs = QgsCoordinateReferenceSystem.fromWkt(crs_wkt)
        grid = self.grid(parameters, context, xy, working_crs, units)
        feedback.pushInfo(f"Grid: {grid.n_cols} x {grid.n_rows} cells of {grid.pixel_size:g} {units}, "
                          f"extent {', '.join(f'{v:.10g}' for v in grid.extent)}.")
        grid.check_memory(MEMORY_LIMIT_BYTES, n_bands=n_bands)
        return grid, self.mask(parameters, context, grid, working_crs, units, feedback)

    def grid(self, parameters, context, xy: np.ndarray, working_crs: QgsCoordinateReferenceSystem,
             units: str) -> GridSpec:
        """The output grid from EXTENT (default: the samples' extent; at most ten times its diagonal) and
        PIXEL_SIZE (default: from spacing)."""
        rectangle = self.parameterAsExtent(parameters, self.EXTENT, context, working_crs)
        if rectangle.isNull():
            low, high = xy.min(axis=0), xy.max(axis=0)
            extent = (float(low[0]), float(low[1]), float(high[0]), float(high[1]))
        else:
            extent = (rectangle.xMinimum(), rectangle.yMinimum(), rectangle.xMaximum(), rectangle.yMaximum())
            check_extent_reach(extent, xy, units)
        pixel_size = self.optional_number(parameters, self.PIXEL_SIZE, context)
        if pixel_size is None:
            pixel_size = default_pixel_size(xy, extent, max_cells=MAX_DEFAULT_CELLS)
        grid = GridSpec.from_extent(*extent, pixel_size)
        if not grid.overlaps(xy):
            raise FieldcastError(f"The extent {', '.join(f'{v:.10g}' for v in extent)} does not overlap the "
                                 "samples. Choose an extent that covers (part of) the sample layer, or leave it "
                                 "empty to use the samples' extent.")
        return grid

    def mask(self, parameters, context, grid: GridSpec, working_crs: QgsCoordinateReferenceSystem, units: str,
             feedback) -> np.ndarray | None:
        """Boolean cell mask from the MASK polygons (reprojected to the working CRS), or None without a mask.

        Raises
        ------
        FieldcastError
            For a mask layer without a defined CRS, without polygons, or holding no cell centre (saying why).
        """
        source = self.parameterAsSource(parameters, self.MASK, context)
        if source is None:
            return None
        name = f"{source.sourceName()} (MASK)"
        defined_crs(crs_wkt(source.sourceCrs()), name)
        request = QgsFeatureRequest().setNoAttributes().setDestinationCrs(working_crs, context.transformContext())
        shapes = [bytes(feature.geometry().asWkb()) for feature in source.getFeatures(request)
                  if not feature.geometry().isEmpty()]
        inside = checked_cell_mask(grid, shapes, name, units)
        feedback.pushInfo(f"Mask: {int(inside.sum())} of {grid.n_cells} cells inside the polygons.")
        return inside
