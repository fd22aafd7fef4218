"""What the raster-writing algorithms (predict, predictmany, simulate) share: the output grid, mask and threshold.

:class:`RasterAlgorithm` adds to :class:`.algorithm_base.FieldcastAlgorithm` the
parameters that define the output grid and the threshold of the decision maps,
and turns them into an engine :class:`GridSpec`, a cell mask and a threshold. A
template raster (TEMPLATE) gives the grid and the working CRS exactly, and its nodata
cells may serve as mask (TEMPLATE_NODATA_MASK); EXTENT and PIXEL_SIZE are then refused.
"""
from __future__ import annotations

import math

import numpy as np
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsFeatureRequest,
    QgsProcessing,
    QgsProcessingParameterBoolean,
    QgsProcessingParameterExtent,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterLayer,
)

from ..algorithms import (
    FieldcastError,
    GridSpec,
    RasterTemplate,
    checked_cell_mask,
    defined_crs,
    output_grid,
)
from .algorithm_base import FieldcastAlgorithm, advanced, raster_file_source
from .sample_reader import crs_wkt

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
    """Base of the algorithms that write rasters on a grid chosen by TEMPLATE, or EXTENT and PIXEL_SIZE, and MASK."""

    TEMPLATE = "TEMPLATE"
    TEMPLATE_NODATA_MASK = "TEMPLATE_NODATA_MASK"
    EXTENT = "EXTENT"
    PIXEL_SIZE = "PIXEL_SIZE"
    MASK = "MASK"
    OUTPUT_EXCEEDANCE = "OUTPUT_EXCEEDANCE"

    def add_grid_parameters(self) -> None:
        """TEMPLATE, EXTENT, PIXEL_SIZE, MASK and TEMPLATE_NODATA_MASK (advanced), all optional."""
        self.addParameter(QgsProcessingParameterRasterLayer(
            self.TEMPLATE, self.tr("Template raster (its grid and CRS; empty = extent and pixel size)"),
            optional=True))
        self.addParameter(QgsProcessingParameterExtent(self.EXTENT, self.tr("Extent (empty = samples)"),
                                                       optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            self.PIXEL_SIZE, self.tr("Pixel size (working CRS units; empty = from sample spacing)"),
            type=QgsProcessingParameterNumber.Double, optional=True, minValue=0.0))
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.MASK, self.tr("Mask polygons"), [QgsProcessing.TypeVectorPolygon], optional=True))
        self.addParameter(advanced(QgsProcessingParameterBoolean(
            self.TEMPLATE_NODATA_MASK, self.tr("Template nodata cells stay nodata"), defaultValue=True)))

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
        """Refuse a PIXEL_SIZE of 0 or less, and EXTENT or PIXEL_SIZE beside TEMPLATE, with our advice (before
        Processing's generic messages)."""
        given = [name for name in (self.EXTENT, self.PIXEL_SIZE) if parameters.get(name) not in (None, "")]
        if parameters.get(self.TEMPLATE) not in (None, "") and given:
            names = " and ".join(given)
            return False, (f"TEMPLATE gives the output grid (its extent, cell size and CRS), so {names} cannot be "
                           f"set beside it. Leave {names} empty to use the template's grid (the template wins), or "
                           f"leave TEMPLATE empty to use {names}.")
        if parameters.get(self.PIXEL_SIZE) not in (None, ""):
            size = self.parameterAsDouble(parameters, self.PIXEL_SIZE, context)
            if not (math.isfinite(size) and size > 0):
                return False, (f"The pixel size (PIXEL_SIZE) must be a positive distance in the working CRS's "
                               f"units (e.g. metres); got {parameters[self.PIXEL_SIZE]!r}. Give a size above 0, "
                               "or leave it empty to derive it from the sample spacing.")
        return super().checkParameterValues(parameters, context)

    def grid_template(self, parameters, context) -> RasterTemplate | None:
        """The TEMPLATE raster's grid and CRS (the CRS QGIS shows for the layer), None when TEMPLATE is empty.

        Raises
        ------
        FieldcastError
            For a layer GDAL cannot read, a CRS in degrees, or a grid that is rotated or has non-square cells.
        """
        layer = self.parameterAsRasterLayer(parameters, self.TEMPLATE, context)
        if layer is None:
            return None
        name = f"the template raster {layer.name()!r} (TEMPLATE)"
        return RasterTemplate.read(raster_file_source(layer, name, self.TEMPLATE), name,
                                   crs_wkt(layer.crs()) if layer.crs().isValid() else None)

    def grid_and_mask(self, parameters, context, xy: np.ndarray, crs_wkt: str, units: str, feedback,
                      n_bands: int) -> tuple[GridSpec, np.ndarray | None]:
        """The output grid (checked to fit ``n_bands`` Float32 bands in memory) and its cell mask, logged."""
        working_crs = QgsCoordinateReferenceSystem.fromWkt(crs_wkt)
        template = self.grid_template(parameters, context)
        grid = self.grid(parameters, context, xy, working_crs, units) if template is None else template.grid
        feedback.pushInfo(f"Grid{'' if template is None else ' of ' + template.name}: {grid.n_cols} x "
                          f"{grid.n_rows} cells of {grid.pixel_size:g} {units}, extent "
                          f"{', '.join(f'{v:.10g}' for v in grid.extent)}.")
        if template is not None and not grid.overlaps(xy):
            raise FieldcastError(f"The grid of {template.name} does not overlap the samples. Choose a template that "
                                 "covers (part of) the sample layer, or leave TEMPLATE empty.")
        grid.check_memory(MEMORY_LIMIT_BYTES, n_bands=n_bands)
        inside = self.mask(parameters, context, grid, working_crs, units, feedback)
        if template is None or not self.parameterAsBoolean(parameters, self.TEMPLATE_NODATA_MASK, context):
            return grid, inside
        return grid, self.template_mask(template, inside, feedback)

    @staticmethod
    def template_mask(template: RasterTemplate, inside: np.ndarray | None, feedback) -> np.ndarray | None:
        """``inside`` (None = every cell) without the template's nodata cells (TEMPLATE_NODATA_MASK), logged.

        Raises
        ------
        FieldcastError
            If no cell is left: the template is all nodata, or has values only outside the mask polygons.
        """
        grid = template.grid
        valid = template.valid_cells(feedback.isCanceled)
        if valid is None:
            return inside
        feedback.pushInfo(f"Template nodata: {grid.n_cells - int(valid.sum()):,} of {grid.n_cells:,} cells are "
                          f"nodata in {template.name} and stay nodata (TEMPLATE_NODATA_MASK; set it to false to "
                          "map them).")
        kept = valid if inside is None else valid & inside
        if not kept.any():
            raise FieldcastError(f"No cell inside the mask polygons has a value in {template.name}. Set "
                                 "TEMPLATE_NODATA_MASK to false, or choose other mask polygons.")
        return kept

    def grid(self, parameters, context, xy: np.ndarray, working_crs: QgsCoordinateReferenceSystem,
             units: str) -> GridSpec:
        """The output grid from EXTENT (default: the samples' extent; at most ten times its diagonal) and
        PIXEL_SIZE (default: from spacing)."""
        rectangle = self.parameterAsExtent(parameters, self.EXTENT, context, working_crs)
        extent = None if rectangle.isNull() else (rectangle.xMinimum(), rectangle.yMinimum(), rectangle.xMaximum(),
                                                  rectangle.yMaximum())
        return output_grid(xy, extent, self.optional_number(parameters, self.PIXEL_SIZE, context), units)

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
