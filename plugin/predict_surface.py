"""Toolbox algorithm 'Predict surface' (fieldcast:predict)."""
from __future__ import annotations

from qgis.core import QgsProcessingParameterRasterDestination

from ..algorithms import SUPPORTS, SurfaceScale
from .algorithm_base import progress_callback
from .help_text import (
    BACKTRANSFORM_HELP,
    GRID_HELP,
    MODEL_FILE_HELP,
    NEIGHBOURHOOD_HELP,
    TARGET_CRS_HELP,
    THRESHOLD_HELP,
    compose_help,
)
from .surface_algorithm import SurfaceAlgorithm


class PredictSurfaceAlgorithm(SurfaceAlgorithm):
    """Krige a raster of predictions (and their variance and exceedance probability) from point samples and a model."""

    SUPPORT = "SUPPORT"
    OUTPUT = "OUTPUT"
    OUTPUT_VARIANCE = "OUTPUT_VARIANCE"
    ICON = "predict.svg"

    NAME = "predict"
    DISPLAY_NAME = "Predict surface"
    HELP = compose_help(
        "Kriges a raster surface from point samples with a fitted covariance model: per cell the best linear "
        "unbiased prediction of the value, and optionally its error variance and the probability that the value "
        "exceeds a threshold.",
        [("Sample points / Value field", "The samples to predict from (the same kind the model was fitted "
          "to). NULL values are skipped; samples at one location are averaged."),
         MODEL_FILE_HELP,
         *GRID_HELP,
         BACKTRANSFORM_HELP,
         ("Support", "point (default): the value at each cell centre, for maps of the attribute itself. cell: "
          "the average over each cell (block kriging with 4 x 4 points per cell), for decisions taken per area, "
          "such as whether a cell-sized unit must be remediated. Cell averages are smoother and their variance "
          "is smaller, because small-scale variation averages out. For a log model the average is taken in the "
          "log scale. Cell support uses all samples (NEIGHBOURS 0)."),
         *NEIGHBOURHOOD_HELP,
         THRESHOLD_HELP,
         TARGET_CRS_HELP],
        [("Prediction", "Float32 GeoTIFF in attribute units (for a log model back-transformed as chosen; "
          "the band description says which). Nodata is -9999."),
         ("Variance", "Optional Float32 GeoTIFF of the prediction-error variance in attribute units squared "
          "(for a log model the lognormal variance). It is the variance of the smooth field, without the "
          "nugget: small next to samples, growing away from them. Its square root is a standard error."),
         ("Exceedance probability", "Optional Float32 GeoTIFF, values 0 to 1: the probability that the value at "
          "the cell (or the cell average, with cell support) is above the threshold, from the kriging prediction "
          "and variance under the model's Gaussian assumption (for a log model in the log scale, with the "
          "threshold log-transformed the same way). It is a probability under the model, not a certainty: 0.3 "
          "means the model gives the value a 30 % chance of exceeding the threshold, and a cell far from samples "
          "sits near the share implied by the mean alone. Needs a threshold.")],
    )

    def initAlgorithm(self, config=None):
        self.add_sample_parameters()
        self.add_model_parameter()
        self.add_grid_parameters()
        self.add_backtransform_parameter()
        self.add_choice(self.SUPPORT, self.tr("Support (point = cell centre, cell = cell average)"), SUPPORTS,
                        "point")
        self.add_neighbourhood_parameters()
        self.add_threshold_parameter()
        self.add_target_crs_parameter()
        self.addParameter(QgsProcessingParameterRasterDestination(self.OUTPUT, self.tr("Prediction")))
        self.addParameter(QgsProcessingParameterRasterDestination(
            self.OUTPUT_VARIANCE, self.tr("Variance"), optional=True, createByDefault=False))
        self.addParameter(QgsProcessingParameterRasterDestination(
            self.OUTPUT_EXCEEDANCE, self.tr("Exceedance probability"), optional=True, createByDefault=False))

    def compute(self, parameters, context, feedback) -> dict:
        exceedance_path, threshold = self.exceedance_destination(parameters, context, threshold_needs_output=True)
        paths = {"prediction": self.raster_destination(parameters, self.OUTPUT, context),
                 "variance": self.raster_destination(parameters, self.OUTPUT_VARIANCE, context),
                 "exceedance": exceedance_path}
        document, samples = self.model_and_samples(parameters, context, feedback, progress_callback(feedback, 0, 30))
        grid, inside = self.grid_and_mask(parameters, context, samples.xy, document.crs_wkt, document.units,
                                          feedback, n_bands=sum(1 for path in paths.values() if path))
        support = self.choice(parameters, self.SUPPORT, context)
        scale = SurfaceScale(document.transform, self.choice(parameters, self.BACKTRANSFORM, context), support,
                             threshold)
        self.krige_surface([document], samples.xy, samples.values, grid, inside, scale,
                           self.neighbourhood(parameters, context), [(samples.field, paths)], feedback,
                           progress_callback(feedback, 30, 100))
        outputs = {self.OUTPUT: paths["prediction"], self.OUTPUT_VARIANCE: paths["variance"],
                   self.OUTPUT_EXCEEDANCE: paths["exceedance"]}
        return {name: path for name, path in outputs.items() if path}
