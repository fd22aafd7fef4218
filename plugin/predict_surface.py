"""Toolbox algorithm 'Predict surface' (fieldcast:predict)."""
from __future__ import annotations

from qgis.core import QgsProcessingParameterNumber, QgsProcessingParameterRasterDestination

from ..algorithms import SUPPORTS, SurfaceScale, check_interval
from .algorithm_base import advanced, progress_callback
from .help_text import (
    BACKTRANSFORM_HELP,
    COVARIATE_HELP,
    ERROR_VARIANCE_HELP,
    GRID_HELP,
    INTERVAL_HELP,
    MAP_AREA_HELP,
    MODEL_FILE_HELP,
    NEIGHBOURHOOD_HELP,
    NONDETECT_HELP,
    NUGGET_HELP,
    PREDICT_TARGET_HELP,
    RASTER_TARGET_CRS_HELP,
    THRESHOLD_HELP,
    compose_help,
)
from .layer_style import style_on_load
from .surface_algorithm import SurfaceAlgorithm


class PredictSurfaceAlgorithm(SurfaceAlgorithm):
    """Krige a raster of predictions (and their variance and exceedance probability) from point samples and a model."""

    SUPPORT = "SUPPORT"
    OUTPUT = "OUTPUT"
    OUTPUT_VARIANCE = "OUTPUT_VARIANCE"
    OUTPUT_SD = "OUTPUT_SD"
    INTERVAL_PROBABILITY = "INTERVAL_PROBABILITY"
    OUTPUT_LOWER = "OUTPUT_LOWER"
    OUTPUT_UPPER = "OUTPUT_UPPER"
    OUTPUT_DISTANCE = "OUTPUT_DISTANCE"
    ICON = "predict.svg"

    NAME = "predict"
    DISPLAY_NAME = "Predict surface"
    HELP = compose_help(
        "Kriges a raster surface from point samples with a fitted covariance model: per cell the best linear "
        "unbiased prediction of the value, its error variance and standard error, and optionally the ends of a "
        "predictive interval and the probability that the value exceeds a threshold.",
        [("Sample points / Value field", "The samples to predict from (the same kind the model was fitted "
          "to). NULL values are skipped; samples at one location are averaged."),
         MODEL_FILE_HELP,
         *COVARIATE_HELP,
         *NONDETECT_HELP,
         *GRID_HELP,
         *MAP_AREA_HELP,
         BACKTRANSFORM_HELP,
         ("Support", "point (default): the value at each cell centre, for maps of the attribute itself. cell: "
          "the average over each cell (block kriging with 4 x 4 points per cell), for decisions taken per area, "
          "such as whether a cell-sized unit must be remediated. Cell averages are smoother and their variance "
          "is smaller, because small-scale variation averages out. For a log model, cell is the arithmetic average "
          "in the attribute's units (the one remediation decisions use): its exact lognormal expected value and "
          "variance, with quantiles and exceedance from a lognormal of the same two moments. cell_log: for a log "
          "model the average of the logs over the cell, back-transformed; it lies below the arithmetic average and "
          "is for comparison with earlier log-scale work only (without a transform it equals cell). Cell support "
          "uses all samples (NEIGHBOURS 0)."),
         *NEIGHBOURHOOD_HELP,
         NUGGET_HELP,
         ERROR_VARIANCE_HELP,
         PREDICT_TARGET_HELP,
         THRESHOLD_HELP,
         INTERVAL_HELP,
         RASTER_TARGET_CRS_HELP],
        [("Prediction", "Float32 GeoTIFF in attribute units (for a log model back-transformed as chosen; "
          "the band description says which). Nodata is -9999; it also marks cells whose kriging prediction lies "
          "more than 6 standard deviations of the model from its mean, which the model gives a chance of about "
          "2e-9 (unstable weights, counted in the log with what to change)."),
         ("Variance", "Float32 GeoTIFF of the prediction-error variance in attribute units squared (for a log "
          "model the lognormal variance exp(2 mu + s2) (exp(s2) - 1)). It is the variance of the smooth field, "
          "without the nugget: small next to samples, growing away from them. The dialog writes it by default; "
          "processing.run and qgis_process only when given a path."),
         ("Standard error", "Float32 GeoTIFF of the prediction standard error in attribute units, the square "
          "root of the variance (for a log model the lognormal standard deviation exp(mu + s2/2) sqrt(exp(s2) - 1), "
          "the spread about the lognormal mean). The dialog writes it by default, as the variance."),
         ("Lower quantile / Upper quantile", "Optional Float32 GeoTIFFs of the ends of the central predictive "
          "interval set by 'Interval probability' (5 % and 95 % by default), in attribute units: mu -/+ z s, and "
          "for a log model exp(mu -/+ z s) - offset, the quantiles of the lognormal predictive distribution. "
          "Use these, not prediction +/- 1.96 standard errors, for a log model: its distribution is skewed, so "
          "the interval is not symmetric about the prediction. Like the variance, they leave out the nugget."),
         ("Exceedance probability", "Optional Float32 GeoTIFF, values 0 to 1: the probability that the value at "
          "the cell (or the cell average, with cell support) is above the threshold, from the kriging prediction "
          "and variance under the model's Gaussian assumption (for a log model in the log scale, with the "
          "threshold log-transformed the same way). It is a probability under the model, not a certainty: 0.3 "
          "means the model gives the value a 30 % chance of exceeding the threshold, and a cell far from samples "
          "sits near the share implied by the mean alone. Needs a threshold."),
         ("Distance to the nearest sample", "Optional Float32 GeoTIFF: per cell the straight-line distance from "
          "its centre to the nearest sample, in working CRS units (e.g. metres). Where it exceeds the model's "
          "effective range the prediction is the model's mean, not something the samples show.")],
    )

    OUTPUT_KINDS = {"prediction": OUTPUT, "variance": OUTPUT_VARIANCE, "sd": OUTPUT_SD, "lower": OUTPUT_LOWER,
                    "upper": OUTPUT_UPPER, "distance": OUTPUT_DISTANCE}
    """The raster outputs besides the exceedance probability, by the engine's surface kind."""

    def initAlgorithm(self, config=None):
        self.add_sample_parameters()
        self.add_model_parameter()
        self.add_covariate_parameters()
        self.add_nondetect_parameters()
        self.add_grid_parameters()
        self.add_map_area_parameters()
        self.add_backtransform_parameter()
        self.add_choice(self.SUPPORT, self.tr("Support (point = cell centre, cell = cell average, "
                                              "cell_log = log-scale average)"), SUPPORTS, "point", expert=True)
        self.add_neighbourhood_parameters()
        self.add_measurement_parameters()
        self.add_prediction_target_parameter()
        self.add_threshold_parameter()
        self.addParameter(advanced(QgsProcessingParameterNumber(
            self.INTERVAL_PROBABILITY, self.tr("Interval probability (for the lower and upper quantiles)"),
            QgsProcessingParameterNumber.Double, defaultValue=0.9, minValue=0.0, maxValue=1.0)))
        self.add_target_crs_parameter()
        self.addParameter(QgsProcessingParameterRasterDestination(self.OUTPUT, self.tr("Prediction")))
        self.addParameter(QgsProcessingParameterRasterDestination(
            self.OUTPUT_VARIANCE, self.tr("Variance"), optional=True, createByDefault=True))
        self.addParameter(QgsProcessingParameterRasterDestination(
            self.OUTPUT_SD, self.tr("Standard error"), optional=True, createByDefault=True))
        self.addParameter(QgsProcessingParameterRasterDestination(
            self.OUTPUT_LOWER, self.tr("Lower quantile"), optional=True, createByDefault=False))
        self.addParameter(QgsProcessingParameterRasterDestination(
            self.OUTPUT_UPPER, self.tr("Upper quantile"), optional=True, createByDefault=False))
        self.addParameter(QgsProcessingParameterRasterDestination(
            self.OUTPUT_EXCEEDANCE, self.tr("Exceedance probability"), optional=True, createByDefault=False))
        self.addParameter(QgsProcessingParameterRasterDestination(
            self.OUTPUT_DISTANCE, self.tr("Distance to the nearest sample"), optional=True, createByDefault=False))

    def compute(self, parameters, context, feedback) -> dict:
        exceedance_path, threshold = self.exceedance_destination(parameters, context, threshold_needs_output=True)
        interval = self.parameterAsDouble(parameters, self.INTERVAL_PROBABILITY, context)
        check_interval(interval)  # before the samples are read or a model fitted
        paths = {kind: self.raster_destination(parameters, name, context) for kind, name in self.OUTPUT_KINDS.items()}
        paths["exceedance"] = exceedance_path
        document, samples = self.model_and_samples(parameters, context, feedback, progress_callback(feedback, 0, 30),
                                                   spread_included=True)
        grid, inside = self.grid_and_mask(parameters, context, samples.xy, document.crs_wkt, document.units,
                                          feedback, n_bands=sum(1 for path in paths.values() if path))
        support = self.choice(parameters, self.SUPPORT, context)
        scale = SurfaceScale(document.transform, self.choice(parameters, self.BACKTRANSFORM, context), support,
                             threshold, interval, self.added_variance(parameters, context, document, samples,
                                                                      feedback, support))
        self.krige_surface([document], samples.xy, samples.values, grid, inside, scale,
                           self.neighbourhood(parameters, context), [(samples.field, paths)], feedback,
                           progress_callback(feedback, 30, 100), samples.covariates,
                           self.cell_covariates(parameters, context, document, grid), samples.error_variance,
                           samples.sets)
        percents = {"lower": 50 * (1 - interval), "upper": 50 * (1 + interval)}
        for quantity, path in paths.items():
            style_on_load(context, path, samples.field, quantity, threshold=threshold, percent=percents.get(quantity))
        outputs = {name: paths[kind] for kind, name in self.OUTPUT_KINDS.items()}
        outputs[self.OUTPUT_EXCEEDANCE] = paths["exceedance"]
        return {name: path for name, path in outputs.items() if path}
