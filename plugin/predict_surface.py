"""Toolbox algorithm 'Predict surface' (fieldcast:predict)."""
from __future__ import annotations

from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsFeatureRequest,
    QgsProcessing,
    QgsProcessingParameterExtent,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterDestination,
)

from ..algorithms.errors import FieldcastError
from ..algorithms.grid import GridSpec, default_pixel_size
from ..algorithms.kriging import KrigingPredictor
from ..algorithms.mask import cell_mask
from .algorithm_base import FieldcastAlgorithm, progress_callback
from .help_text import MODEL_FILE_HELP, TARGET_CRS_HELP, compose_help
from .surface import BACKTRANSFORMS, SurfaceScale, write_surface

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


class PredictSurfaceAlgorithm(FieldcastAlgorithm):
    """Krige a raster of predictions (and their variance) from point samples and a model."""

    EXTENT = "EXTENT"
    PIXEL_SIZE = "PIXEL_SIZE"
    MASK = "MASK"
    BACKTRANSFORM = "BACKTRANSFORM"
    OUTPUT = "OUTPUT"
    OUTPUT_VARIANCE = "OUTPUT_VARIANCE"
    ICON = "predict.svg"

    NAME = "predict"
    DISPLAY_NAME = "Predict surface"
    HELP = compose_help(
        "Kriges a raster surface from point samples with a fitted covariance model: at each cell centre the "
        "best linear unbiased prediction of the value, and optionally its error variance.",
        [("Sample points / Value field", "The samples to predict from (the same kind the model was fitted "
          "to). NULL values are skipped; samples at one location are averaged."),
         MODEL_FILE_HELP,
         ("Extent", "Area of the raster; empty = extent of the samples. Cell edges fall on whole multiples "
          "of the pixel size, so rasters from several runs line up."),
         ("Pixel size", "Cell width in working CRS units (e.g. metres). Empty: half the median distance "
          "between neighbouring samples, rounded, and coarser if the grid would exceed a million cells."),
         ("Mask", "Optional polygon layer: cells whose centre is outside every polygon are nodata."),
         ("Back-transform", "For a log model only: median (exp(mu) - offset, the default, robust) or mean "
          "(exp(mu + s2/2) - offset)."),
         TARGET_CRS_HELP],
        [("Prediction", "Float32 GeoTIFF in attribute units (for a log model back-transformed as chosen; "
          "the band description says which). Nodata is -9999."),
         ("Variance", "Optional Float32 GeoTIFF of the prediction-error variance in attribute units squared "
          "(for a log model the lognormal variance). It is the variance of the smooth field, without the "
          "nugget: small next to samples, growing away from them. Its square root is a standard error.")],
    )

    def initAlgorithm(self, config=None):
        self.add_sample_parameters()
        self.add_model_parameter()
        self.addParameter(QgsProcessingParameterExtent(self.EXTENT, self.tr("Extent (empty = samples)"),
                                                       optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            self.PIXEL_SIZE, self.tr("Pixel size (working CRS units; empty = from sample spacing)"),
            type=QgsProcessingParameterNumber.Double, optional=True, minValue=0.0))
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.MASK, self.tr("Mask polygons"), [QgsProcessing.TypeVectorPolygon], optional=True))
        self.add_choice(self.BACKTRANSFORM, self.tr("Back-transform (log models)"), BACKTRANSFORMS, "median")
        self.add_target_crs_parameter()
        self.addParameter(QgsProcessingParameterRasterDestination(self.OUTPUT, self.tr("Prediction")))
        self.addParameter(QgsProcessingParameterRasterDestination(
            self.OUTPUT_VARIANCE, self.tr("Variance"), optional=True, createByDefault=False))

    def compute(self, parameters, context, feedback) -> dict:
        document, samples = self.model_and_samples(parameters, context, feedback, progress_callback(feedback, 0, 30))
        working_crs = QgsCoordinateReferenceSystem.fromWkt(document.crs_wkt)
        grid = self.grid(parameters, context, samples.xy, working_crs)
        feedback.pushInfo(f"Grid: {grid.n_cols} x {grid.n_rows} cells of {grid.pixel_size:g} {document.units}, "
                          f"extent {', '.join(f'{v:.10g}' for v in grid.extent)}.")
        grid.check_memory(MEMORY_LIMIT_BYTES, n_bands=2)
        inside = self.mask(parameters, context, grid, working_crs, feedback)
        prediction_path = geotiff_path(self.parameterAsOutputLayer(parameters, self.OUTPUT, context))
        variance_path = geotiff_path(self.parameterAsOutputLayer(parameters, self.OUTPUT_VARIANCE, context)) or None
        scale = SurfaceScale(document.transform, self.choice(parameters, self.BACKTRANSFORM, context))
        predictor = KrigingPredictor(samples.xy, samples.values, document.covariance, document.mean)
        metadata = {"fieldcast_model": document.to_dict(), "fieldcast_backtransform": scale.backtransform}
        write_surface(predictor, grid, inside, scale, samples.field, document.crs_wkt, prediction_path,
                      variance_path, metadata, progress_callback(feedback, 30, 100), feedback.isCanceled)
        results = {self.OUTPUT: prediction_path}
        if variance_path:
            results[self.OUTPUT_VARIANCE] = variance_path
        return results

    def grid(self, parameters, context, xy, working_crs: QgsCoordinateReferenceSystem) -> GridSpec:
        """The output grid from EXTENT (default: the samples' extent) and PIXEL_SIZE (default: from spacing)."""
        rectangle = self.parameterAsExtent(parameters, self.EXTENT, context, working_crs)
        if rectangle.isNull():
            low, high = xy.min(axis=0), xy.max(axis=0)
            extent = (float(low[0]), float(low[1]), float(high[0]), float(high[1]))
        else:
            extent = (rectangle.xMinimum(), rectangle.yMinimum(), rectangle.xMaximum(), rectangle.yMaximum())
        if parameters.get(self.PIXEL_SIZE) in (None, ""):
            pixel_size = default_pixel_size(xy, extent, max_cells=MAX_DEFAULT_CELLS)
        else:
            pixel_size = self.parameterAsDouble(parameters, self.PIXEL_SIZE, context)
        grid = GridSpec.from_extent(*extent, pixel_size)
        if not grid.overlaps(xy):
            raise FieldcastError(f"The extent {', '.join(f'{v:.10g}' for v in extent)} does not overlap the "
                                 "samples. Choose an extent that covers (part of) the sample layer, or leave it "
                                 "empty to use the samples' extent.")
        return grid

    def mask(self, parameters, context, grid: GridSpec, working_crs: QgsCoordinateReferenceSystem, feedback):
        """Boolean cell mask from the MASK polygons (reprojected to the working CRS), or None without a mask."""
        source = self.parameterAsSource(parameters, self.MASK, context)
        if source is None:
            return None
        request = QgsFeatureRequest().setNoAttributes().setDestinationCrs(working_crs, context.transformContext())
        shapes = [bytes(feature.geometry().asWkb()) for feature in source.getFeatures(request)
                  if not feature.geometry().isEmpty()]
        inside = cell_mask(grid, shapes)
        if not inside.any():
            raise FieldcastError("No cell centre lies inside the mask polygons. Check that the mask covers the "
                                 "extent, or use a smaller pixel size.")
        feedback.pushInfo(f"Mask: {int(inside.sum())} of {grid.n_cells} cells inside the polygons.")
        return inside
