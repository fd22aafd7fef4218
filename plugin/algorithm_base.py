"""What the Fieldcast toolbox algorithms share: common parameters, sample and model reading, error handling.

Each algorithm subclasses :class:`FieldcastAlgorithm`, declares its own
parameters in ``initAlgorithm`` with the helpers here, and does its work in
``compute``; ``processAlgorithm`` turns engine errors into Processing errors.
"""
from __future__ import annotations

import os
from collections.abc import Callable, Sequence

from qgis.core import (
    QgsProcessing,
    QgsProcessingAlgorithm,
    QgsProcessingException,
    QgsProcessingParameterBoolean,
    QgsProcessingParameterCrs,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterField,
    QgsProcessingParameterFile,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
)
from qgis.PyQt.QtCore import QCoreApplication

from ..algorithms.errors import Cancelled, FieldcastError
from ..algorithms.fit.options import FIT_METHODS, KERNEL_CHOICES
from ..algorithms.io.model_file import ModelDocument
from ..algorithms.model.mean import MeanModel
from ..algorithms.model.transform import TRANSFORM_KINDS, Transform
from .icons import icon, icon_path
from .model_source import FitSettings, describe_document, fit_document, load_document
from .report.page import ReportError
from .sample_reader import LayerSamples, ModelSamples, prepare_samples, read_layer_samples

TREND_CHOICES = ("constant", "linear", "quadratic")


def check_neighbours(neighbours: int, mean: MeanModel, per: str) -> None:
    """Refuse a NEIGHBOURS of 1 up to the number of trend terms (0 = all samples is fine).

    ``per`` names what each neighbourhood serves ("cell", "sample") in the message.
    """
    minimum = mean.n_terms + 1
    if 0 < neighbours < minimum:
        raise FieldcastError(f"NEIGHBOURS is {neighbours}, but the {mean.kind} mean of the model needs at least "
                             f"{minimum} samples per {per}. Set NEIGHBOURS to {minimum} or more (16 to 64 is common "
                             "practice), or to 0 for all samples.")


def search_words(search_radius: float | None, units: str) -> str:
    """Log words for a search radius, `` within 300 m (along the major axis ...)``; "" without one."""
    if search_radius is None:
        return ""
    return f" within {search_radius:g} {units} (along the major axis of the model's anisotropy)"


def progress_callback(feedback, start: float = 0.0, stop: float = 100.0) -> Callable[[float], None]:
    """A ``progress(fraction)`` for the engine that moves the Processing bar from ``start`` to ``stop`` percent."""
    return lambda fraction: feedback.setProgress(start + (stop - start) * min(max(fraction, 0.0), 1.0))


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
    KERNEL = "KERNEL"
    ANISOTROPY = "ANISOTROPY"
    TREND = "TREND"
    METHOD = "METHOD"
    NEIGHBOURS = "NEIGHBOURS"
    SEARCH_RADIUS = "SEARCH_RADIUS"
    ICON = "fieldcast.svg"

    def tr(self, text: str) -> str:
        return QCoreApplication.translate("Fieldcast", text)

    def name(self) -> str:
        return self.NAME

    def displayName(self) -> str:
        return self.tr(self.DISPLAY_NAME)

    def shortHelpString(self) -> str:
        return self.HELP

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
        """INPUT (point layer) and FIELD (numeric attribute of INPUT)."""
        self.add_input_parameter()
        self.addParameter(QgsProcessingParameterField(
            self.FIELD, self.tr("Value field"), parentLayerParameterName=self.INPUT,
            type=QgsProcessingParameterField.Numeric))

    def add_model_parameter(self) -> None:
        """MODEL: optional model file written by 'Fit covariance model'."""
        self.addParameter(QgsProcessingParameterFile(
            self.MODEL, self.tr("Model file (from 'Fit covariance model'; empty = fit with the defaults)"),
            extension="json", optional=True))

    def add_target_crs_parameter(self) -> None:
        """TARGET_CRS: optional projected CRS to work in."""
        self.addParameter(QgsProcessingParameterCrs(
            self.TARGET_CRS, self.tr("Target CRS (projected; empty = automatic)"), optional=True))

    def add_report_parameter(self, description: str) -> None:
        """OUTPUT_REPORT: optional HTML report; the dialog writes it to a temporary file unless skipped."""
        self.addParameter(QgsProcessingParameterFileDestination(
            self.OUTPUT_REPORT, description, self.tr("HTML files (*.html)"), optional=True, createByDefault=True))

    def add_fit_parameters(self) -> None:
        """TRANSFORM, LOG_OFFSET (advanced), KERNEL, ANISOTROPY, TREND and METHOD: the choices of a fit."""
        self.add_choice(self.TRANSFORM, self.tr("Transform"), TRANSFORM_KINDS, "none")
        offset = QgsProcessingParameterNumber(self.LOG_OFFSET, self.tr("Log offset (attribute units)"),
                                              type=QgsProcessingParameterNumber.Double, defaultValue=0.0)
        offset.setFlags(offset.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
        self.addParameter(offset)
        self.add_choice(self.KERNEL, self.tr("Covariance family"), KERNEL_CHOICES, "auto")
        self.addParameter(QgsProcessingParameterBoolean(self.ANISOTROPY, self.tr("Anisotropy"), defaultValue=True))
        self.add_choice(self.TREND, self.tr("Trend"), TREND_CHOICES, "constant")
        self.add_choice(self.METHOD, self.tr("Fitting method"), FIT_METHODS, "reml")

    def fit_choices(self, parameters, context) -> tuple[Transform, FitSettings]:
        """The transform and fit settings chosen with the parameters of :meth:`add_fit_parameters`."""
        transform = Transform(self.choice(parameters, self.TRANSFORM, context),
                              self.parameterAsDouble(parameters, self.LOG_OFFSET, context))
        settings = FitSettings(kernel=self.choice(parameters, self.KERNEL, context),
                               anisotropy=self.parameterAsBoolean(parameters, self.ANISOTROPY, context),
                               trend=self.choice(parameters, self.TREND, context),
                               method=self.choice(parameters, self.METHOD, context))
        return transform, settings

    def add_neighbourhood_parameters(self, per: str = "cell") -> None:
        """NEIGHBOURS (0 = all samples) and SEARCH_RADIUS (optional); ``per`` is what each neighbourhood serves."""
        self.addParameter(QgsProcessingParameterNumber(
            self.NEIGHBOURS, self.tr(f"Neighbours per {per} (0 = all samples)"),
            type=QgsProcessingParameterNumber.Integer, defaultValue=0, minValue=0))
        self.addParameter(QgsProcessingParameterNumber(
            self.SEARCH_RADIUS, self.tr("Search radius (working CRS units; empty = no limit)"),
            type=QgsProcessingParameterNumber.Double, optional=True, minValue=0.0))

    def neighbourhood_choice(self, parameters, context) -> tuple[int, float | None]:
        """The NEIGHBOURS and SEARCH_RADIUS chosen (SEARCH_RADIUS None when empty)."""
        return (self.parameterAsInt(parameters, self.NEIGHBOURS, context),
                self.optional_number(parameters, self.SEARCH_RADIUS, context))

    def optional_number(self, parameters, name: str, context) -> float | None:
        """The value of an optional number parameter, None when it is left empty."""
        if parameters.get(name) in (None, ""):
            return None
        return self.parameterAsDouble(parameters, name, context)

    def add_choice(self, name: str, description: str, options: Sequence[str], default: str) -> None:
        """An enum parameter whose values are the option words themselves (e.g. ``KERNEL=spherical``)."""
        self.addParameter(QgsProcessingParameterEnum(
            name, description, options=list(options), defaultValue=default, usesStaticStrings=True))

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
        """Samples of INPUT/FIELD in the working CRS (chosen from TARGET_CRS and the layer CRS)."""
        source = self.parameterAsSource(parameters, self.INPUT, context)
        if source is None:
            raise QgsProcessingException(self.invalidSourceError(parameters, self.INPUT))
        field = self.parameterAsString(parameters, self.FIELD, context)
        target = self.parameterAsCrs(parameters, self.TARGET_CRS, context)
        return read_layer_samples(source, field, target, feedback)

    def model_and_samples(self, parameters, context, feedback,
                          progress: Callable[[float], None]) -> tuple[ModelDocument, ModelSamples]:
        """The model from MODEL, or one fitted with the default settings, and the samples in its scale."""
        layer_samples = self.read_samples(parameters, context, feedback)
        path = self.parameterAsFile(parameters, self.MODEL, context)
        if path:
            document = load_document(path, layer_samples.working)
            feedback.pushInfo(f"Model read from {path}.")
            if document.field and document.field != layer_samples.field:
                feedback.pushWarning(f"The model was fitted to field {document.field!r}; "
                                     f"it is applied here to {layer_samples.field!r}.")
            samples = prepare_samples(layer_samples, document.transform, feedback)
        else:
            settings = FitSettings()
            feedback.pushInfo(f"No model file given: fitting a model with the default settings "
                              f"({settings.describe()}, no transform). Run 'Fit covariance model' to choose them.")
            samples = prepare_samples(layer_samples, Transform(), feedback)
            document, _ = fit_document(samples.xy, samples.values, Transform(), layer_samples.working,
                                       layer_samples.field, settings, progress, feedback.isCanceled)
        feedback.pushInfo(describe_document(document))
        return document, samples

    # --- running -------------------------------------------------------------------------------------------

    def processAlgorithm(self, parameters, context, feedback):
        try:
            return self.compute(parameters, context, feedback)
        except Cancelled as exc:
            raise QgsProcessingException(self.tr("Cancelled; no output was written.")) from exc
        except (FieldcastError, ReportError) as exc:
            raise QgsProcessingException(str(exc)) from exc

    def compute(self, parameters, context, feedback) -> dict:
        """Do the work of ``processAlgorithm``; engine and report errors become Processing errors there."""
        raise NotImplementedError
