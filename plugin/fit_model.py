"""Toolbox algorithm 'Fit covariance model' (fieldcast:fitmodel)."""
from __future__ import annotations

from qgis.core import (
    QgsProcessingOutputNumber,
    QgsProcessingParameterBoolean,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
)

from ..algorithms.fitting import FIT_METHODS, KERNEL_CHOICES
from ..algorithms.transform import TRANSFORM_KINDS, Transform
from .algorithm_base import FieldcastAlgorithm, progress_callback
from .help_text import TARGET_CRS_HELP, compose_help
from .model_source import FitSettings, fit_document
from .sample_reader import prepare_samples

TREND_CHOICES = ("constant", "linear", "quadratic")

NUMBER_OUTPUTS = (
    ("PARTIAL_SILL", "Partial sill (modelling units squared)"),
    ("RANGE", "Range along the major axis (working CRS units)"),
    ("NUGGET", "Nugget (modelling units squared)"),
    ("AZIMUTH", "Azimuth of the major axis (degrees clockwise from north)"),
    ("RATIO", "Anisotropy ratio (minor / major range)"),
    ("LOG_LIKELIHOOD", "Log-likelihood"),
    ("AIC", "AIC"),
)


class FitModelAlgorithm(FieldcastAlgorithm):
    """Fit a covariance model (nugget, family, range, anisotropy, trend) to point samples."""

    TRANSFORM = "TRANSFORM"
    LOG_OFFSET = "LOG_OFFSET"
    KERNEL = "KERNEL"
    ANISOTROPY = "ANISOTROPY"
    TREND = "TREND"
    METHOD = "METHOD"
    OUTPUT_MODEL = "OUTPUT_MODEL"
    ICON = "fitmodel.svg"

    NAME = "fitmodel"
    DISPLAY_NAME = "Fit covariance model"
    HELP = compose_help(
        "Estimates how the value field varies with distance (and direction) between samples: a nugget plus "
        "a covariance structure with a partial sill and a range, optionally anisotropic, around a constant "
        "or trending mean. The model file it writes is the input of 'Predict surface' and 'Cross-validate "
        "model'.",
        [("Sample points / Value field", "Point layer and its numeric attribute. NULL values are skipped; "
          "samples at the same location are averaged. Multipoints with several points are refused."),
         ("Transform", "none, or log: model ln(value + log offset), for skewed positive data such as metal "
          "concentrations. Log needs every value + offset > 0."),
         ("Log offset", "Added to the values before the logarithm (attribute units, default 0)."),
         ("Covariance family", "auto tries exponential, spherical, Gaussian, Matérn 3/2 and 5/2 and keeps "
          "the best by AIC; or choose one; matern also fits the smoothness."),
         ("Anisotropy", "Let the range depend on direction (an ellipse with an azimuth and a minor/major "
          "ratio)."),
         ("Trend", "Mean of the field: constant, or a linear or quadratic surface of the coordinates."),
         ("Fitting method", "reml (restricted maximum likelihood, the default), ml, or wls (weighted least "
          "squares on the empirical semivariogram)."),
         TARGET_CRS_HELP],
        [("Model file", "JSON file with the fitted model, its CRS, transform and fit statistics."),
         ("Numbers", "Partial sill, range (working CRS units, e.g. metres), nugget, azimuth (degrees), ratio "
          "of the first structure, log-likelihood and AIC, in the modelling scale (after the transform). "
          "Fit warnings appear in the log.")],
    )

    def initAlgorithm(self, config=None):
        self.add_sample_parameters()
        self.add_choice(self.TRANSFORM, self.tr("Transform"), TRANSFORM_KINDS, "none")
        offset = QgsProcessingParameterNumber(self.LOG_OFFSET, self.tr("Log offset (attribute units)"),
                                              type=QgsProcessingParameterNumber.Double, defaultValue=0.0)
        offset.setFlags(offset.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
        self.addParameter(offset)
        self.add_choice(self.KERNEL, self.tr("Covariance family"), KERNEL_CHOICES, "auto")
        self.addParameter(QgsProcessingParameterBoolean(self.ANISOTROPY, self.tr("Anisotropy"), defaultValue=True))
        self.add_choice(self.TREND, self.tr("Trend"), TREND_CHOICES, "constant")
        self.add_choice(self.METHOD, self.tr("Fitting method"), FIT_METHODS, "reml")
        self.add_target_crs_parameter()
        self.addParameter(QgsProcessingParameterFileDestination(
            self.OUTPUT_MODEL, self.tr("Model file"), self.tr("Fieldcast model (*.json)")))
        for name, description in NUMBER_OUTPUTS:
            self.addOutput(QgsProcessingOutputNumber(name, self.tr(description)))

    def compute(self, parameters, context, feedback) -> dict:
        transform = Transform(self.choice(parameters, self.TRANSFORM, context),
                              self.parameterAsDouble(parameters, self.LOG_OFFSET, context))
        settings = FitSettings(kernel=self.choice(parameters, self.KERNEL, context),
                               anisotropy=self.parameterAsBoolean(parameters, self.ANISOTROPY, context),
                               trend=self.choice(parameters, self.TREND, context),
                               method=self.choice(parameters, self.METHOD, context))
        layer_samples = self.read_samples(parameters, context, feedback)
        samples = prepare_samples(layer_samples, transform, feedback)
        feedback.pushInfo(f"Fitting with {settings.describe()}.")
        document = fit_document(samples.xy, samples.values, transform, layer_samples.working, layer_samples.field,
                                settings, progress_callback(feedback, 0.0, 99.0), feedback.isCanceled)
        for warning in document.fit.get("warnings", []):
            feedback.pushWarning(warning)
        path = self.parameterAsFileOutput(parameters, self.OUTPUT_MODEL, context)
        document.save(path)
        feedback.setProgress(100.0)
        first = document.covariance.structures[0]
        return {
            self.OUTPUT_MODEL: path,
            "PARTIAL_SILL": first.partial_sill,
            "RANGE": first.range,
            "NUGGET": document.covariance.nugget,
            "AZIMUTH": first.azimuth,
            "RATIO": first.ratio,
            "LOG_LIKELIHOOD": document.fit.get("log_likelihood"),
            "AIC": document.fit.get("aic"),
        }
