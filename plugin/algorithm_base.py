"""What the Fieldcast toolbox algorithms share: common parameters, sample and model reading, error handling.

Each algorithm subclasses :class:`FieldcastAlgorithm`, declares its own
parameters in ``initAlgorithm`` with the helpers here, and does its work in
``compute``; ``processAlgorithm`` turns engine errors into Processing errors.
"""
from __future__ import annotations

import os
import time
import traceback
from collections.abc import Callable, Sequence

import numpy as np
from qgis.core import (
    QgsProcessing,
    QgsProcessingAlgorithm,
    QgsProcessingException,
    QgsProcessingParameterBoolean,
    QgsProcessingParameterCrs,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterEnum,
    QgsProcessingParameterExtent,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterField,
    QgsProcessingParameterFile,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterFolderDestination,
    QgsProcessingParameterMapLayer,
    QgsProcessingParameterMultipleLayers,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterDestination,
    QgsProcessingParameterRasterLayer,
    QgsProcessingParameterVectorDestination,
    QgsProcessingParameterVectorLayer,
    QgsProcessingUtils,
)
from qgis.PyQt.QtCore import QCoreApplication

from ..algorithms import (
    BACKTRANSFORMS,
    FIT_METHODS,
    KERNEL_CHOICES,
    NONDETECT_TREATMENTS,
    PREDICT_TARGETS,
    TRANSFORM_KINDS,
    Cancelled,
    CovariateSet,
    CovariateSource,
    Declustering,
    FieldcastError,
    FieldcastUsageError,
    FitOptions,
    LogLine,
    ModelDocument,
    Neighbourhood,
    OutputSet,
    RasterTemplate,
    SampleCovariates,
    Transform,
    WorkingCrs,
    censoring_summary,
    check_factor,
    decluster,
    defined_crs,
    fitted_transform,
    impute_censored,
    measurement_variance,
    refuse_read_only,
    remove_stale_files,
    target_words,
    termination_cleanup,
)
from .destinations import destination_value, layer_file, refuse_clashes
from .help_text import SHORT_DESCRIPTIONS, help_url, parameter_help, search_words
from .icons import icon, icon_path
from .model_source import describe_document, fit_document, load_document, log_fit, with_covariate_mean
from .report.page import ReportError
from .sample_reader import LayerSamples, ModelSamples, NonDetects, crs_wkt, prepare_samples, read_layer_samples
from .whole_numbers import whole_number

TREND_CHOICES = ("constant", "linear", "quadratic")
NO_FIELD = ("No value field chosen. Choose the numeric field of the sample layer to model in 'Value field' "
            "(FIELD).")
FILE_OUTPUTS = (QgsProcessingParameterFileDestination, QgsProcessingParameterRasterDestination,
                QgsProcessingParameterFeatureSink, QgsProcessingParameterVectorDestination,
                QgsProcessingParameterFolderDestination)


def log_spread(feedback, included: bool, why: str = "") -> None:
    """Say whether the variances of a run with samples below a limit add the spread between the completed data
    sets (info) or leave it out (a warning; ``why`` names the reason, e.g. local kriging)."""
    if included:
        feedback.pushInfo("Variances add the spread between the completed data sets (Rubin's rules).")
    else:
        feedback.pushWarning(f"{why}Variances, intervals and exceedance leave out the spread between the completed "
                             "data sets of the samples below a limit, so they are somewhat too narrow near them.")

LAYER_INPUTS = (QgsProcessingParameterFeatureSource, QgsProcessingParameterVectorLayer,
                QgsProcessingParameterRasterLayer, QgsProcessingParameterMapLayer, QgsProcessingParameterExtent)


def push_log(feedback, lines: Sequence[LogLine]) -> None:
    """Show the engine's log lines: warnings as warnings, the rest as information."""
    for line in lines:
        (feedback.pushWarning if line.level == "warning" else feedback.pushInfo)(line.text)


def advanced(definition: QgsProcessingParameterDefinition) -> QgsProcessingParameterDefinition:
    """``definition`` flagged advanced: the dialog shows it under "Advanced Parameters", folded away."""
    definition.setFlags(definition.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
    return definition


def progress_callback(feedback, start: float = 0.0, stop: float = 100.0) -> Callable[[float], None]:
    """A ``progress(fraction)`` for the engine that moves the Processing bar from ``start`` to ``stop`` percent."""
    return lambda fraction: feedback.setProgress(start + (stop - start) * min(max(fraction, 0.0), 1.0))


def raster_file_source(layer, name: str, parameter: str) -> str:
    """What GDAL opens for a raster layer (its source); FieldcastError naming ``name`` when it is served by
    another provider (a WMS, WCS or XYZ layer), which has no file to read."""
    if layer.providerType() != "gdal":
        raise FieldcastError(f"{name} is not a raster file (its provider is {layer.providerType()!r}). Save it "
                             f"as a GeoTIFF first (Export > Save As) and choose that file in {parameter}.")
    return layer.source()


def choice_problem(definition, value) -> str:
    """Why ``value`` is not a valid word of an enum parameter made by :meth:`FieldcastAlgorithm.add_choice`
    ("" when it is valid, empty, or the parameter is not such a choice)."""
    if not isinstance(definition, QgsProcessingParameterEnum) or not definition.usesStaticStrings() \
            or value in (None, ""):
        return ""
    allowed = definition.options()
    given = value if isinstance(value, (list, tuple)) else [value]
    if all(item in allowed or (isinstance(item, int) and 0 <= item < len(allowed)) for item in given):
        return ""
    return (f"{definition.name()} ({definition.description()}) must be one of {', '.join(allowed)}; got "
            f"{value!r}. Set {definition.name()} to one of these words.")


class FieldcastAlgorithm(QgsProcessingAlgorithm):
    """Base of the Fieldcast algorithms.

    Subclasses set ``NAME`` (the id after ``fieldcast:``), ``DISPLAY_NAME``, ``HELP`` (HTML from
    :func:`.help_text.compose_help`) and ``ICON``, add their parameters in ``initAlgorithm`` and do
    their work in ``compute``.
    """

    NAME = ""
    DISPLAY_NAME = ""
    HELP = ""
    INPUT = "INPUT"
    FIELD = "FIELD"
    MODEL = "MODEL"
    TARGET_CRS = "TARGET_CRS"
    OUTPUT_REPORT = "OUTPUT_REPORT"
    TRANSFORM = "TRANSFORM"
    LOG_OFFSET = "LOG_OFFSET"
    BOXCOX_LAMBDA = "BOXCOX_LAMBDA"
    LIKELIHOOD_NEIGHBOURS = "LIKELIHOOD_NEIGHBOURS"
    KERNEL = "KERNEL"
    ANISOTROPY = "ANISOTROPY"
    TREND = "TREND"
    METHOD = "METHOD"
    NEIGHBOURS = "NEIGHBOURS"
    SEARCH_RADIUS = "SEARCH_RADIUS"
    LOCAL_MEAN = "LOCAL_MEAN"
    THRESHOLD = "THRESHOLD"
    BACKTRANSFORM = "BACKTRANSFORM"
    COVARIATES = "COVARIATES"
    CLASS_COVARIATES = "CLASS_COVARIATES"
    NUGGET = "NUGGET"
    ERROR_VARIANCE_FIELD = "ERROR_VARIANCE_FIELD"
    PREDICT_TARGET = "PREDICT_TARGET"
    BELOW_LIMIT_FIELD = "BELOW_LIMIT_FIELD"
    NONDETECTS = "NONDETECTS"
    SUBSTITUTION_FACTOR = "SUBSTITUTION_FACTOR"
    ICON = "fieldcast.svg"

    def tr(self, text: str) -> str:
        return QCoreApplication.translate("Fieldcast", text)

    def name(self) -> str:
        return self.NAME

    def displayName(self) -> str:
        return self.tr(self.DISPLAY_NAME)

    def shortHelpString(self) -> str:
        return self.HELP

    def shortDescription(self) -> str:
        return SHORT_DESCRIPTIONS.get(self.NAME, "")

    def tags(self) -> list[str]:
        return search_words(self.NAME)

    def helpUrl(self) -> str:
        return help_url(self.NAME, self.DISPLAY_NAME)

    def addParameter(self, definition, createOutput: bool = True) -> bool:
        """Add ``definition`` with its help from the algorithm's help text, unless it has its own."""
        if not definition.help():
            definition.setHelp(parameter_help(self.HELP, definition.description()))
        return super().addParameter(definition, createOutput)

    def createInstance(self):
        return type(self)()

    def group(self) -> str:
        return self.tr("Kriging")

    def groupId(self) -> str:
        return "kriging"

    def icon(self):
        return icon(self.ICON)

    def svgIconPath(self) -> str:
        return icon_path(self.ICON)

    # --- parameters shared by several algorithms -------------------------------------------------------

    def add_input_parameter(self) -> None:
        """INPUT (point layer)."""
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.INPUT, self.tr("Sample points"), [QgsProcessing.TypeVectorPoint]))

    def add_sample_parameters(self) -> None:
        """INPUT (point layer) and FIELD (numeric attribute of INPUT).

        FIELD's default is the empty name, so the dialog leaves it unchosen; without a default it would
        pick the layer's first numeric field, which in a GeoPackage is the feature id ``fid``.
        """
        self.add_input_parameter()
        self.addParameter(QgsProcessingParameterField(
            self.FIELD, self.tr("Value field"), defaultValue="", parentLayerParameterName=self.INPUT,
            type=QgsProcessingParameterField.Any))

    def add_nondetect_parameters(self) -> None:
        """BELOW_LIMIT_FIELD (a field of INPUT true where the value is a reporting limit), NONDETECTS (likelihood or
        substitution) and SUBSTITUTION_FACTOR, all advanced."""
        self.addParameter(advanced(QgsProcessingParameterField(
            self.BELOW_LIMIT_FIELD, self.tr("Below-limit field (true = the value is a reporting limit)"),
            parentLayerParameterName=self.INPUT, type=QgsProcessingParameterField.Any, optional=True)))
        self.add_choice(self.NONDETECTS, self.tr("Values below a limit"), NONDETECT_TREATMENTS, "likelihood",
                        expert=True)
        self.addParameter(advanced(QgsProcessingParameterNumber(
            self.SUBSTITUTION_FACTOR, self.tr("Substitution factor (times the limit)"),
            type=QgsProcessingParameterNumber.Double, defaultValue=0.5)))

    def nondetects(self, parameters, context) -> NonDetects:
        """The choices of :meth:`add_nondetect_parameters` (the defaults for an algorithm without them)."""
        if self.parameterDefinition(self.NONDETECTS) is None:
            return NonDetects()
        factor = self.parameterAsDouble(parameters, self.SUBSTITUTION_FACTOR, context)
        check_factor(factor)
        return NonDetects(self.parameterAsString(parameters, self.BELOW_LIMIT_FIELD, context),
                          self.choice(parameters, self.NONDETECTS, context), factor)

    @staticmethod
    def censoring(layer_samples: LayerSamples, samples: ModelSamples, nondetects: NonDetects) -> dict | None:
        """The model file's entry for substituted limits (the engine's fit writes it for the likelihood), or
        None."""
        if layer_samples.censored is None or nondetects.treatment != "substitution":
            return None
        return censoring_summary(int(layer_samples.censored.sum()), len(samples.values), "substitution",
                                 factor=nondetects.factor)

    def add_model_parameter(self) -> None:
        """MODEL: optional model file written by 'Fit covariance model'."""
        self.addParameter(QgsProcessingParameterFile(
            self.MODEL, self.tr("Model file (from 'Fit covariance model'; empty = fit with the defaults)"),
            extension="json", optional=True))

    def add_covariate_parameters(self) -> None:
        """COVARIATES and CLASS_COVARIATES: optional raster layers whose values (or classes) enter the mean."""
        for name, description in ((self.COVARIATES, "Covariate rasters (continuous values)"),
                                  (self.CLASS_COVARIATES, "Class covariate rasters (class codes)")):
            self.addParameter(QgsProcessingParameterMultipleLayers(
                name, self.tr(description), QgsProcessing.TypeRaster, optional=True))

    def covariate_sources(self, parameters, context) -> list[CovariateSource]:
        """The COVARIATES then the CLASS_COVARIATES layers, named by their layer names (refused when two share one)."""
        sources = []
        for name, kind in ((self.COVARIATES, "continuous"), (self.CLASS_COVARIATES, "class")):
            for layer in self.parameterAsLayerList(parameters, name, context) or []:
                crs = layer.crs()
                path = raster_file_source(layer, f"The covariate raster {layer.name()!r} ({name})", name)
                sources.append(CovariateSource(layer.name(), path, kind,
                                               crs_wkt(crs) if crs.isValid() else ""))
        names = [source.name for source in sources]
        repeated = sorted({name for name in names if names.count(name) > 1})
        if repeated:
            raise FieldcastError(f"Several covariate layers are named {', '.join(map(repr, repeated))}; the model "
                                 "knows covariates by layer name. Rename the layers (Layer Properties > Source > "
                                 "Layer name) or give each raster once in COVARIATES or CLASS_COVARIATES.")
        return sources

    def fit_covariates(self, samples: ModelSamples, sources: list[CovariateSource], working: WorkingCrs,
                       feedback) -> tuple[ModelSamples, CovariateSet]:
        """The samples with the covariates read at them for a fit, and the covariates they describe."""
        if not sources:
            return samples, CovariateSet()
        read = SampleCovariates.read(sources, samples.xy, working.wkt)
        self.log_covariate_skips(read.skipped, len(samples.values), feedback)
        return samples.with_covariates(read.columns, read.kept), read.covariates

    def model_covariates(self, samples: ModelSamples, document: ModelDocument, sources: list[CovariateSource],
                         working: WorkingCrs, feedback) -> ModelSamples:
        """The samples with the model's covariates read at them; the rasters must be the model's (name, order)."""
        if document.mean.covariate_names and not document.covariates.covariates:
            raise FieldcastError("The model file names covariate columns but no covariate rasters. Refit it with "
                                 "'Fit covariance model' and the rasters in COVARIATES or CLASS_COVARIATES.")
        document.covariates.require(sources)
        if not sources:
            return samples
        columns = document.covariates.at_points(sources, samples.xy, working.wkt)
        kept = np.all(np.isfinite(columns), axis=1)
        self.log_covariate_skips(int(np.count_nonzero(~kept)), len(kept), feedback)
        if not kept.any():
            raise FieldcastError("No sample has a value in every covariate raster (or a class the model knows). "
                                 "Check that the rasters cover the samples, or refit the model.")
        return samples.with_covariates(columns[kept], kept)

    @staticmethod
    def log_covariate_skips(skipped: int, total: int, feedback) -> None:
        """Say how many samples were left out for want of a covariate value."""
        if skipped:
            feedback.pushWarning(f"Skipped {skipped:,} of {total:,} samples where a covariate raster has no value "
                                 "(nodata, outside the raster, or a class the model has no coefficient for); "
                                 f"{total - skipped:,} samples remain.")

    def add_target_crs_parameter(self) -> None:
        """TARGET_CRS (advanced): optional projected CRS to work in."""
        self.addParameter(advanced(QgsProcessingParameterCrs(
            self.TARGET_CRS, self.tr("Target CRS (projected; empty = automatic)"), optional=True)))

    def add_report_parameter(self, description: str) -> None:
        """OUTPUT_REPORT: optional HTML report; the dialog writes it to a temporary file unless skipped."""
        self.addParameter(QgsProcessingParameterFileDestination(
            self.OUTPUT_REPORT, description, self.tr("HTML files (*.html)"), optional=True, createByDefault=True))

    def add_fit_parameters(self) -> None:
        """TRANSFORM, LOG_OFFSET and BOXCOX_LAMBDA (advanced), KERNEL, ANISOTROPY, TREND, METHOD and
        LIKELIHOOD_NEIGHBOURS (advanced): the choices of a fit."""
        self.add_choice(self.TRANSFORM, self.tr("Transform"), TRANSFORM_KINDS, "none")
        self.addParameter(advanced(QgsProcessingParameterNumber(
            self.LOG_OFFSET, self.tr("Log offset (attribute units)"), type=QgsProcessingParameterNumber.Double,
            defaultValue=0.0)))
        self.addParameter(advanced(QgsProcessingParameterNumber(
            self.BOXCOX_LAMBDA, self.tr("Box-Cox lambda (empty = estimate)"), type=QgsProcessingParameterNumber.Double,
            optional=True)))
        self.add_choice(self.KERNEL, self.tr("Covariance family"), KERNEL_CHOICES, "auto")
        self.addParameter(QgsProcessingParameterBoolean(self.ANISOTROPY, self.tr("Anisotropy"), defaultValue=True))
        self.add_choice(self.TREND, self.tr("Trend"), TREND_CHOICES, "constant")
        self.add_choice(self.METHOD, self.tr("Fitting method"), FIT_METHODS, "reml")
        self.addParameter(advanced(QgsProcessingParameterNumber(
            self.LIKELIHOOD_NEIGHBOURS, self.tr("Likelihood neighbours (above 2,000 samples)"),
            type=QgsProcessingParameterNumber.Integer, defaultValue=FitOptions().likelihood_neighbours, minValue=1)))

    def fit_choices(self, parameters, context) -> tuple[Transform, FitOptions]:
        """The transform and the engine's fit settings chosen with the parameters of :meth:`add_fit_parameters`
        (the one place the dialog's words become them) and NUGGET."""
        kind = self.choice(parameters, self.TRANSFORM, context)
        lam = self.optional_number(parameters, self.BOXCOX_LAMBDA, context) if kind == "boxcox" else None
        transform = Transform(kind, self.parameterAsDouble(parameters, self.LOG_OFFSET, context), lam)
        settings = FitOptions(kernel=self.choice(parameters, self.KERNEL, context),
                              anisotropy=self.parameterAsBoolean(parameters, self.ANISOTROPY, context),
                              mean=self.choice(parameters, self.TREND, context),
                              method=self.choice(parameters, self.METHOD, context),
                              nugget=self.fixed_nugget(parameters, context),
                              likelihood_neighbours=self.parameterAsInt(parameters, self.LIKELIHOOD_NEIGHBOURS,
                                                                        context))
        return transform, settings

    # --- measurement error --------------------------------------------------------------------------------

    def add_measurement_parameters(self, nugget: bool = True) -> None:
        """ERROR_VARIANCE_FIELD (optional numeric field of INPUT) and, with ``nugget``, NUGGET (optional, empty =
        fitted), both advanced."""
        if nugget:
            self.addParameter(advanced(QgsProcessingParameterNumber(
                self.NUGGET, self.tr("Nugget (held fixed; modelling units squared; empty = fitted)"),
                type=QgsProcessingParameterNumber.Double, optional=True, minValue=0.0)))
        self.addParameter(advanced(QgsProcessingParameterField(
            self.ERROR_VARIANCE_FIELD, self.tr("Error variance field (per sample; modelling units squared)"),
            parentLayerParameterName=self.INPUT, type=QgsProcessingParameterField.Numeric, optional=True)))

    def add_prediction_target_parameter(self) -> None:
        """PREDICT_TARGET (advanced): the true value (default) or a new measurement."""
        self.add_choice(self.PREDICT_TARGET, self.tr("Target of the prediction (true value or new measurement)"),
                        PREDICT_TARGETS, "true", expert=True)

    def fixed_nugget(self, parameters, context) -> float | None:
        """NUGGET, None when empty (or when the algorithm has none)."""
        if self.parameterDefinition(self.NUGGET) is None:
            return None
        return self.optional_number(parameters, self.NUGGET, context)

    def error_field(self, parameters, context) -> str:
        """ERROR_VARIANCE_FIELD, "" when empty (or when the algorithm has none)."""
        if self.parameterDefinition(self.ERROR_VARIANCE_FIELD) is None:
            return ""
        return self.parameterAsString(parameters, self.ERROR_VARIANCE_FIELD, context) or ""

    def added_variance(self, parameters, context, document: ModelDocument, samples: ModelSamples, feedback,
                       support: str = "point") -> float | None:
        """The variance PREDICT_TARGET adds to the kriging variance (engine's ``measurement_variance``), logged."""
        variance = measurement_variance(self.choice(parameters, self.PREDICT_TARGET, context), document.covariance,
                                        samples.error_variance, support)
        feedback.pushInfo(target_words(variance, samples.error_variance))
        return variance

    def complete_transform(self, layer_samples: LayerSamples, transform: Transform, settings: FitOptions,
                           sources: list[CovariateSource], feedback) -> tuple[Transform, Declustering]:
        """The transform of a fit completed from the samples (the engine's ``fitted_transform``), and the samples'
        cell declustering, both logged (with the warning of strongly clustered sampling).

        Normal-score knots come from every sample, weighted by the declustering weights. A Box-Cox lambda is
        estimated on the samples as the fit sees them (coincident ones averaged in attribute units, covariates
        read), with the trend and covariates of the fit.
        """
        declustering = decluster(layer_samples.xy, layer_samples.values)
        for line in declustering.log_lines(layer_samples.working.units):
            feedback.pushInfo(line)
        clustered = declustering.warning()
        if clustered:
            feedback.pushWarning(clustered)
        if transform.kind == "boxcox" and not transform.complete:
            feedback.pushInfo("Estimating the Box-Cox lambda by profile likelihood (one fit per lambda tried).")
            raw, covariates = self.fit_covariates(prepare_samples(layer_samples, Transform(), feedback), sources,
                                                  layer_samples.working, feedback)
            fitted = fitted_transform(transform, raw.xy, raw.values,
                                      with_covariate_mean(settings, raw.xy, covariates, raw.covariates),
                                      covariates=raw.covariates, progress=progress_callback(feedback, 0.0, 30.0),
                                      should_stop=feedback.isCanceled)
        else:
            fitted = fitted_transform(transform, layer_samples.xy, layer_samples.values, settings,
                                      declustering=declustering)
        for line in fitted.log_lines():
            feedback.pushInfo(line)
        return fitted.transform, declustering

    def add_neighbourhood_parameters(self, per: str = "cell", local_mean: bool = True) -> None:
        """NEIGHBOURS (0 = all samples), SEARCH_RADIUS (optional) and, with ``local_mean``, LOCAL_MEAN, all
        advanced; ``per`` is what each neighbourhood serves."""
        self.addParameter(advanced(QgsProcessingParameterNumber(
            self.NEIGHBOURS, self.tr(f"Neighbours per {per} (0 = all samples)"),
            type=QgsProcessingParameterNumber.Integer, defaultValue=0, minValue=0)))
        self.addParameter(advanced(QgsProcessingParameterNumber(
            self.SEARCH_RADIUS, self.tr("Search radius (working CRS units; empty = no limit)"),
            type=QgsProcessingParameterNumber.Double, optional=True, minValue=0.0)))
        if local_mean:
            self.addParameter(advanced(QgsProcessingParameterBoolean(
                self.LOCAL_MEAN, self.tr("Re-estimate the mean in each neighbourhood"), defaultValue=False)))

    def add_threshold_parameter(self) -> None:
        """THRESHOLD: optional value in the attribute's original units."""
        self.addParameter(QgsProcessingParameterNumber(
            self.THRESHOLD, self.tr("Threshold (attribute units; for exceedance)"),
            type=QgsProcessingParameterNumber.Double, optional=True))

    def add_backtransform_parameter(self) -> None:
        """BACKTRANSFORM (advanced): median (default) or mean, for transformed models."""
        self.add_choice(self.BACKTRANSFORM, self.tr("Back-transform (transformed models)"), BACKTRANSFORMS, "median",
                        expert=True)

    def neighbourhood(self, parameters, context) -> Neighbourhood:
        """The NEIGHBOURS, SEARCH_RADIUS and LOCAL_MEAN chosen (SEARCH_RADIUS None when empty)."""
        local_mean = (self.parameterDefinition(self.LOCAL_MEAN) is not None
                      and self.parameterAsBoolean(parameters, self.LOCAL_MEAN, context))
        return Neighbourhood(whole_number(self.given_value(parameters, self.NEIGHBOURS), "NEIGHBOURS", 0),
                             self.optional_number(parameters, self.SEARCH_RADIUS, context), local_mean)

    def feature_source(self, parameters, name: str, context, empty: str):
        """The feature source of parameter ``name``, checked: a defined CRS, and refused with ``empty`` when it
        has no feature."""
        source = self.parameterAsSource(parameters, name, context)
        if source is None:
            raise QgsProcessingException(self.invalidSourceError(parameters, name))
        defined_crs(crs_wkt(source.sourceCrs()), f"{source.sourceName()} ({name})")
        if source.featureCount() == 0:
            raise FieldcastError(empty)
        return source

    def given_value(self, parameters, name: str):
        """The value of parameter ``name`` as given, its default when left out or empty (for :func:`whole_number`)."""
        value = parameters.get(name)
        return self.parameterDefinition(name).defaultValue() if value in (None, "") else value

    def optional_number(self, parameters, name: str, context) -> float | None:
        """The value of an optional number parameter, None when it is left empty."""
        if parameters.get(name) in (None, ""):
            return None
        return self.parameterAsDouble(parameters, name, context)

    def add_choice(self, name: str, description: str, options: Sequence[str], default: str,
                   expert: bool = False) -> None:
        """An enum parameter whose values are the option words themselves (e.g. ``KERNEL=spherical``);
        ``expert`` flags it advanced."""
        definition = QgsProcessingParameterEnum(name, description, options=list(options), defaultValue=default,
                                                usesStaticStrings=True)
        self.addParameter(advanced(definition) if expert else definition)

    def checkParameterValues(self, parameters, context):
        """Refuse an unchosen FIELD, an unknown word for a choice (e.g. ``KERNEL=foo``) with the allowed words, and
        a NEIGHBOURS that is not a whole number from 0, with advice, before Processing's generic message."""
        if self.parameterDefinition(self.FIELD) is not None and \
                not self.parameterAsString(parameters, self.FIELD, context):
            return False, NO_FIELD
        for definition in self.parameterDefinitions():
            problem = choice_problem(definition, parameters.get(definition.name()))
            if problem:
                return False, problem
        if self.parameterDefinition(self.NEIGHBOURS) is not None:
            try:
                self.neighbourhood(parameters, context)
            except FieldcastError as exc:
                return False, str(exc)
        return super().checkParameterValues(parameters, context)

    def choice(self, parameters, name: str, context) -> str:
        """The chosen word of an enum parameter made by :meth:`add_choice`."""
        return self.parameterAsEnumString(parameters, name, context)

    def report_destination(self, parameters, context) -> str:
        """The OUTPUT_REPORT path, "" when no report is wanted.

        Raises
        ------
        FieldcastError
            If the report's folder does not exist: checked before any work, so no other output is written either.
        """
        path = self.parameterAsFileOutput(parameters, self.OUTPUT_REPORT, context)
        folder = os.path.dirname(os.path.abspath(path))
        if path and not os.path.isdir(folder):
            raise FieldcastError(f"The folder {folder} does not exist; choose an existing folder for the report.")
        return path

    # --- reading samples and models ----------------------------------------------------------------------

    def read_samples(self, parameters, context, feedback) -> LayerSamples:
        """Samples of INPUT/FIELD in the working CRS (chosen from the template, TARGET_CRS and the layer CRS)."""
        source = self.parameterAsSource(parameters, self.INPUT, context)
        if source is None:
            raise QgsProcessingException(self.invalidSourceError(parameters, self.INPUT))
        field = self.parameterAsString(parameters, self.FIELD, context)
        target = self.parameterAsCrs(parameters, self.TARGET_CRS, context)
        return read_layer_samples(source, field, target, feedback, self.grid_template(parameters, context),
                                  self.error_field(parameters, context), self.nondetects(parameters, context).field)

    def grid_template(self, parameters, context) -> RasterTemplate | None:
        """The template raster whose CRS is the working CRS; None here (see ``RasterAlgorithm``)."""
        return None

    def model_and_samples(self, parameters, context, feedback, progress: Callable[[float], None],
                          spread_included: bool = False) -> tuple[ModelDocument, ModelSamples]:
        """The model from MODEL, or one fitted with the default settings, and the samples in its scale.

        Values below a limit (likelihood treatment) are fitted as limits, and then replaced by their conditional
        mean below the limit given the model (see :meth:`imputed_samples`; ``spread_included`` when the caller krigs
        every completed data set, and says so with :func:`log_spread`)."""
        layer_samples = self.read_samples(parameters, context, feedback)
        nondetects = self.nondetects(parameters, context)
        sources = self.covariate_sources(parameters, context) if self.parameterDefinition(self.COVARIATES) else []
        working = layer_samples.working
        path = self.parameterAsFile(parameters, self.MODEL, context)
        if path:
            document = load_document(path, working)
            feedback.pushInfo(f"Model read from {path}.")
            if document.field and document.field != layer_samples.field:
                feedback.pushWarning(f"The model was fitted to field {document.field!r}; "
                                     f"it is applied here to {layer_samples.field!r}.")
            self.log_measurement_settings(parameters, context, document, layer_samples.error_field, feedback)
            samples = prepare_samples(layer_samples, document.transform, feedback, nondetects)
            samples = self.model_covariates(samples, document, sources, working, feedback)
        else:
            settings = FitOptions(nugget=self.fixed_nugget(parameters, context))
            feedback.pushInfo(f"No model file given: fitting a model with the default settings "
                              f"({settings.describe()}, no transform). Run 'Fit covariance model' to choose them.")
            samples, covariates = self.fit_covariates(prepare_samples(layer_samples, Transform(), feedback,
                                                                      nondetects), sources, working, feedback)
            document, result = fit_document(samples.xy, samples.values, Transform(), working, layer_samples.field,
                                            settings, progress, feedback.isCanceled, covariates, samples.covariates,
                                            samples.error_variance, samples.error_field, samples.censored,
                                            self.censoring(layer_samples, samples, nondetects))
            log_fit(feedback, samples.xy, samples.values, result, document, columns=samples.covariates)
        feedback.pushInfo(describe_document(document))
        return document, self.imputed_samples(samples, document, feedback, spread_included)

    @staticmethod
    def imputed_samples(samples: ModelSamples, document: ModelDocument, feedback,
                        spread_included: bool = False) -> ModelSamples:
        """The samples with each value below a limit replaced by its conditional mean below the limit given the
        model and the other samples (the mean of 20 joint draws, seeded), unchanged without such values.

        Kriging is linear in the values, so the prediction equals the average of the predictions of the drawn
        data sets; the kriging variance then leaves out the spread between those predictions (said in the log).
        """
        if not samples.censored_count():
            return samples
        completed = impute_censored(samples.xy, samples.values, samples.censored, document.covariance,
                                    document.mean, document.coefficients, samples.covariates)
        feedback.pushInfo(f"{samples.censored_count()} sample(s) below a limit enter kriging as their conditional "
                          "mean below the limit given the model (the average of 20 draws): predictions equal the "
                          "average over the drawn data sets.")
        if not spread_included:
            log_spread(feedback, False)
        return samples.with_values(completed.mean(axis=0), completed)

    def log_measurement_settings(self, parameters, context, document: ModelDocument, error_field: str,
                                 feedback) -> None:
        """Warn when NUGGET is given beside a model file (ignored), and when the model was fitted with error
        variances but ERROR_VARIANCE_FIELD is empty here, or the other way round."""
        if self.fixed_nugget(parameters, context) is not None:
            feedback.pushWarning("NUGGET is ignored: the model file's nugget applies. Refit the model with "
                                 "'Fit covariance model' and NUGGET to change it.")
        fitted_with = document.fit.get("error_variance_field")
        if fitted_with and not error_field:
            feedback.pushWarning(f"The model was fitted with the per-sample error variances of {fitted_with!r}, but "
                                 "ERROR_VARIANCE_FIELD is empty here, so kriging treats the samples as exact but for "
                                 "the nugget. Set ERROR_VARIANCE_FIELD to that field.")
        elif error_field and not fitted_with:
            feedback.pushInfo(f"The model was fitted without per-sample error variances; kriging adds those of "
                              f"{error_field!r} to its nugget.")

    # --- running -------------------------------------------------------------------------------------------

    def output_files(self, parameters, context) -> list[tuple[str, str]]:
        """``(parameter name, path)`` of every file output the user named (temporary outputs left out)."""
        return [(definition.name(), destination_value(parameters.get(definition.name())))
                for definition in self.parameterDefinitions() if isinstance(definition, FILE_OUTPUTS)]

    def input_files(self, parameters, context) -> list[tuple[str, str]]:
        """``(parameter name, path)`` of every input file: layer sources (also EXTENT layers and each covariate
        raster) and file parameters."""
        files = []
        for definition in self.parameterDefinitions():
            name = definition.name()
            if isinstance(definition, QgsProcessingParameterFile):
                files.append((name, self.parameterAsFile(parameters, name, context)))
            elif isinstance(definition, LAYER_INPUTS):
                files.append((name, self.layer_input_file(parameters.get(name), context)))
            elif isinstance(definition, QgsProcessingParameterMultipleLayers):
                files.extend((name, self.layer_input_file(value, context))
                             for value in parameters.get(name) or [])
        return files

    @staticmethod
    def layer_input_file(value, context) -> str:
        """The source file of a layer parameter value, also when given as a layer id or name of the project."""
        path = layer_file(value)
        if path or not isinstance(value, str) or not value:
            return path
        return layer_file(QgsProcessingUtils.mapLayerFromString(value, context, False))

    def refuse_overwrites(self, parameters, context) -> list[tuple[str, str]]:
        """Refuse, before any work, an output that would overwrite an input file or another output, or replace
        a read-only file; returns the outputs' ``(parameter name, path)``."""
        outputs = self.output_files(parameters, context)
        refuse_clashes(outputs, self.input_files(parameters, context))
        for name, path in outputs:
            refuse_read_only(path, name)
        return outputs

    @staticmethod
    def clear_stale_files(outputs: Sequence[tuple[str, str]], started: float, feedback) -> None:
        """Clear the output folders of files an interrupted earlier run left behind (before ``started``, the
        time this run began), saying so in the log."""
        folders = {path if os.path.isdir(path) else os.path.dirname(os.path.abspath(path)) for _, path in outputs
                   if path}
        for folder in sorted(folders):
            done = remove_stale_files(folder, started)
            if done:
                feedback.pushInfo(f"Cleared in {folder} the files an interrupted earlier run left behind: "
                                  + "; ".join(done) + ".")

    def processAlgorithm(self, parameters, context, feedback):
        started = time.time()
        try:
            self.clear_stale_files(self.refuse_overwrites(parameters, context), started, feedback)
            with termination_cleanup(), OutputSet() as files:
                outputs = self.compute(parameters, context, feedback)
                files.commit_all()
            return outputs
        except Cancelled as exc:
            raise QgsProcessingException(self.tr("Cancelled; no output was written.")) from exc
        except FieldcastUsageError as exc:  # a bug in a caller, not the user's input
            raise self.internal_error(exc, feedback) from exc
        except (FieldcastError, ReportError) as exc:
            raise QgsProcessingException(str(exc)) from exc
        except QgsProcessingException:
            raise
        except Exception as exc:  # noqa: BLE001 - any other failure is a bug: reported, with its traceback logged
            raise self.internal_error(exc, feedback) from exc

    def internal_error(self, exc: Exception, feedback) -> QgsProcessingException:
        """The Processing error for an unexpected exception; its traceback goes to the log."""
        feedback.reportError("".join(traceback.format_exception(type(exc), exc, exc.__traceback__)))
        return QgsProcessingException(self.tr(
            f"Internal error in {self.displayName()}: {type(exc).__name__}: {exc}. Please report it; the details "
            "are in the log."))

    def compute(self, parameters, context, feedback) -> dict:
        """Do the work of ``processAlgorithm``; engine and report errors become Processing errors there.

        Files written inside (GeoTIFFs, model files, reports) are staged and appear together when ``compute``
        returns; an error, a cancel or a SIGTERM (where a handler can be installed) leaves none. Feature sinks
        are written by QGIS in place (``sinks.checked_sink``: the earlier file is kept until the run succeeds),
        so ``compute`` writes them last, after every file is complete.
        """
        raise NotImplementedError
