"""Toolbox algorithm 'Predict at points' (fieldcast:predictpoints)."""
from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from qgis.core import (
    QgsFeature,
    QgsFeatureRequest,
    QgsField,
    QgsFields,
    QgsProcessing,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
)

from ..algorithms import (
    Cancelled,
    CellPredictor,
    CovariateSet,
    CovariateSource,
    ExtrapolationCheck,
    ImputedKriging,
    LocalKrigingPredictor,
    SurfaceScale,
    TargetDraw,
    cell_predictor,
    choose_predictor,
    predict_points,
    same_crs,
    transform_points,
)
from .algorithm_base import FieldcastAlgorithm, log_spread, progress_callback, push_log
from .destinations import destination_value
from .field_names import name_limit, result_names
from .field_types import field_type
from .help_text import (
    BACKTRANSFORM_HELP,
    COVARIATE_HELP,
    ERROR_VARIANCE_HELP,
    MODEL_FILE_HELP,
    NONDETECT_HELP,
    NUGGET_HELP,
    POINT_NEIGHBOURHOOD_HELP,
    PREDICT_TARGET_HELP,
    TARGET_CRS_HELP,
    compose_help,
)
from .sample_reader import crs_wkt, feature_point
from .sinks import SinkWriter, checked_sink
from .surface_algorithm import log_gap, log_unresolved

CHUNK = 4096
"""Target features read, kriged and written at a time (memory stays bounded whatever the layer's size)."""
SUFFIXES = {"prediction": "est", "variance": "var", "sd": "sd", "exceedance": "pexc"}
"""The result field of each engine quantity: ``<FIELD>_<suffix>``."""


class PredictPointsAlgorithm(FieldcastAlgorithm):
    """Krige the value, its variance and standard error (and an exceedance probability) at the points of a layer."""

    TARGETS = "TARGETS"
    OUTPUT = "OUTPUT"
    ICON = "predictpoints.svg"

    NAME = "predictpoints"
    DISPLAY_NAME = "Predict at points"
    HELP = compose_help(
        "Kriges the value at each point of a target layer (wells, receptors, parcel centres) from point samples "
        "with a fitted covariance model: the best linear unbiased estimate, its error variance and standard "
        "error, and optionally the probability that the value exceeds a threshold, added to a copy of the "
        "target layer.",
        [("Sample points / Value field", "The samples to predict from (the same kind the model was fitted "
          "to). NULL values are skipped; samples at one location are averaged."),
         MODEL_FILE_HELP,
         *COVARIATE_HELP,
         *NONDETECT_HELP,
         ("Target points", "Point layer of the places to predict at, in any CRS: its points are reprojected to "
          "the working CRS for kriging, and the output keeps its own geometry, CRS and fields. Features without "
          "a geometry (or with an empty one) are copied with empty results and counted in the log; a multipoint "
          "of several points is refused (run 'Multipart to singleparts' first)."),
         ("Threshold", "A limit in the attribute's own units (e.g. 500 for 500 ppm), also for a log model: the "
          "tool transforms it the same way as the data. With it, each point also gets the probability of "
          "exceeding it."),
         BACKTRANSFORM_HELP,
         *POINT_NEIGHBOURHOOD_HELP,
         NUGGET_HELP,
         ERROR_VARIANCE_HELP,
         PREDICT_TARGET_HELP,
         TARGET_CRS_HELP],
        [("Predicted points", "A copy of the target layer (its geometry, CRS and every field) with, for the "
          "value field FIELD: FIELD_est, the estimate at the point (point support; for a log model back-transformed "
          "as chosen); FIELD_var, its error variance (attribute units squared; for a log model the lognormal "
          "variance exp(2 mu + s2) (exp(s2) - 1)); FIELD_sd, its standard error (the square root of the variance: "
          "for a log model the lognormal standard deviation exp(mu + s2/2) sqrt(exp(s2) - 1), the spread of the "
          "predictive distribution in attribute units); and, with a threshold, FIELD_pexc, the probability under "
          "the model's Gaussian assumption (in the log scale for a log model) that the value exceeds it. Variance "
          "and standard error leave out the nugget, as in 'Predict surface', so at a point the values equal that "
          "tool's rasters at a cell centre. A name the target layer already has (case ignored) gets _2, _3, ... "
          "appended, and a shapefile's names are clipped to 10 characters; the log says so. Points left without "
          "a result (too few samples within the search radius, or a prediction the model does not allow) get "
          "empty (NULL) values, counted in the log.")],
    )

    def initAlgorithm(self, config=None):
        self.add_sample_parameters()
        self.add_model_parameter()
        self.add_covariate_parameters()
        self.add_nondetect_parameters()
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.TARGETS, self.tr("Target points"), [QgsProcessing.TypeVectorPoint]))
        self.add_threshold_parameter()
        self.add_backtransform_parameter()
        self.add_neighbourhood_parameters("point")
        self.add_measurement_parameters()
        self.add_prediction_target_parameter()
        self.add_target_crs_parameter()
        self.addParameter(QgsProcessingParameterFeatureSink(
            self.OUTPUT, self.tr("Predicted points"), QgsProcessing.TypeVectorPoint))

    def targets(self, parameters, context):
        """The TARGETS source, checked: a defined CRS and at least one feature."""
        return self.feature_source(parameters, self.TARGETS, context, "The target layer (TARGETS) is empty. Choose a "
                                   "point layer that holds the places to predict at.")

    def result_names(self, parameters, field: str, kinds: list[str], source, feedback) -> list[str]:
        """``<field>_est`` and the others for ``kinds``, clipped and de-duplicated against the target's fields."""
        limit = name_limit(destination_value(parameters.get(self.OUTPUT)))
        names, line = result_names(field, [SUFFIXES[kind] for kind in kinds], source.fields().names(), limit)
        if line:
            feedback.pushInfo(line)
        return names

    def compute(self, parameters, context, feedback) -> dict:
        threshold = self.optional_number(parameters, self.THRESHOLD, context)
        source = self.targets(parameters, context)
        field = self.parameterAsString(parameters, self.FIELD, context)
        kinds = ["prediction", "variance", "sd"] + (["exceedance"] if threshold is not None else [])
        names = self.result_names(parameters, field, kinds, source, feedback)
        document, samples = self.model_and_samples(parameters, context, feedback, progress_callback(feedback, 0, 20),
                                                   spread_included=True)
        sources = self.covariate_sources(parameters, context)
        predictor, lines = choose_predictor(samples.xy, samples.values, document.covariance, document.mean,
                                            self.neighbourhood(parameters, context), units=document.units,
                                            per="target point", covariates=samples.covariates,
                                            error_variance=samples.error_variance)
        push_log(feedback, lines)
        scale = SurfaceScale(document.transform, self.choice(parameters, self.BACKTRANSFORM, context),
                             threshold=threshold, measurement_variance=self.added_variance(
                                 parameters, context, document, samples, feedback))
        check = ExtrapolationCheck.for_samples(samples.xy, samples.values, document.covariance, document.mean,
                                               document.transform, [samples.field], covariates=samples.covariates)
        fields = QgsFields(source.fields())
        for name in names:
            fields.append(QgsField(name, field_type("Double")))
        local = isinstance(predictor, LocalKrigingPredictor)
        if samples.sets is not None:
            log_spread(feedback, not local, "With local kriging: ")
            if not local:
                predictor = ImputedKriging(samples.xy, samples.sets, document.covariance, document.mean,
                                           samples.covariates)
        before = (predictor.singular_targets, predictor.ill_conditioned_targets) if local else (0, 0)
        with checked_sink(self, parameters, self.OUTPUT, context, fields, source.wkbType(),
                          source.sourceCrs()) as sink:
            kriging = TargetKriging(sink, fields, cell_predictor(predictor), scale, kinds, check,
                                    document.crs_wkt, crs_wkt(source.sourceCrs()), source.sourceName(),
                                    TargetDraw() if local else None,
                                    TargetCovariates(document.covariates, sources) if sources else None)
            chunk, total = [], max(source.featureCount(), 1)
            for feature in source.getFeatures(QgsFeatureRequest()):
                chunk.append(feature)
                if len(chunk) == CHUNK:
                    kriging.write(chunk, feedback.isCanceled)
                    chunk = []
                    feedback.setProgress(20 + 80 * min(sink.count / total, 1.0))
            kriging.write(chunk, feedback.isCanceled)
        self.log_counts(kriging, predictor, before, document.units, feedback)
        if local and samples.covariates is None:
            log_gap(predictor, samples.xy, samples.values, kriging.draw.targets, feedback, "target points")
        feedback.setProgress(100)
        return {self.OUTPUT: sink.destination}

    @staticmethod
    def log_counts(kriging: TargetKriging, predictor, before: tuple[int, int], units: str, feedback) -> None:
        """The run's log: points without geometry, unresolved, ill-conditioned, and the extrapolation counts."""
        written = kriging.sink.count
        feedback.pushInfo(f"Predicted at {written - kriging.empty:,} of {written:,} target points.")
        if kriging.no_covariate:
            feedback.pushWarning(f"{kriging.no_covariate:,} target point(s) lie where a covariate raster has no value "
                                 "(nodata, outside the raster, or a class no sample has): they get empty (NULL) "
                                 "results.")
        if kriging.empty:
            feedback.pushWarning(f"{kriging.empty:,} target feature(s) have no geometry (or an empty one): they "
                                 "are copied with empty (NULL) results.")
        local = isinstance(predictor, LocalKrigingPredictor)
        after = (predictor.singular_targets, predictor.ill_conditioned_targets) if local else (0, 0)
        log_unresolved(kriging.unresolved, after[0] - before[0], after[1] - before[1], feedback,
                       "target point(s)", "get no value (NULL)")
        push_log(feedback, kriging.check.lines(units, places="point"))


@dataclass(frozen=True)
class TargetCovariates:
    """The model's covariates and the rasters given for them (checked to be the model's by name and order)."""

    model: CovariateSet
    sources: list[CovariateSource]

    def columns(self, xy: np.ndarray, working_wkt: str) -> np.ndarray:
        """The design columns at ``xy`` (working CRS); NaN rows where a covariate has no usable value."""
        return self.model.at_points(self.sources, xy, working_wkt)


@dataclass
class TargetKriging:
    """Chunks of target features kriged and copied, with the results appended, into one sink.

    ``xy`` of the targets is reprojected from ``target_wkt`` to ``working_wkt``; ``draw``, when given, keeps a
    few of them drawn at random for the neighbourhood check; ``covariates``, when given, reads the model's
    covariates at the targets; ``empty`` counts features without a point, ``no_covariate`` those where a covariate
    has no value, ``unresolved`` those the predictor left without a value.
    """

    sink: SinkWriter
    fields: QgsFields
    predict: CellPredictor
    scale: SurfaceScale
    kinds: list[str]
    check: ExtrapolationCheck
    working_wkt: str
    target_wkt: str
    layer: str
    draw: TargetDraw | None = None
    covariates: TargetCovariates | None = None
    empty: int = 0
    no_covariate: int = 0
    unresolved: int = 0

    def locations(self, features) -> tuple[np.ndarray, np.ndarray]:
        """Which features have a point, and those points (k, 2) in the working CRS."""
        points = [feature_point(feature.geometry(), feature.id(), f"the target layer {self.layer}")
                  for feature in features]
        located = np.array([point is not None for point in points], dtype=bool)
        xy = np.array([point for point in points if point is not None], dtype=float).reshape(-1, 2)
        if len(xy) and not same_crs(self.target_wkt, self.working_wkt):
            xy = transform_points(xy, self.target_wkt, self.working_wkt)
        return located, xy

    def write(self, features: list, should_stop: Callable[[], bool]) -> None:
        """Krige ``features`` (one chunk) and add their copies to the sink."""
        if should_stop():
            raise Cancelled("Prediction at points was cancelled.")
        located, xy = self.locations(features)
        self.empty += int(np.count_nonzero(~located))
        results = np.full((len(self.kinds), len(features)), np.nan)
        columns = None
        if self.covariates is not None and len(xy):
            columns = self.covariates.columns(xy, self.working_wkt)
            usable = np.all(np.isfinite(columns), axis=1)
            self.no_covariate += int(np.count_nonzero(~usable))
            located[located] = usable
            xy, columns = xy[usable], columns[usable]
        if self.draw is not None:
            self.draw.add(xy)
        if len(xy):
            found = predict_points(self.predict, xy, self.scale, self.kinds, check=self.check, covariates=columns,
                                   should_stop=should_stop)
            self.unresolved += int(np.count_nonzero(~found.resolved))
            for row, kind in enumerate(self.kinds):
                results[row, located] = found.layers[0][kind]
        for feature, values in zip(features, results.T):
            copy = QgsFeature(self.fields)
            copy.setGeometry(feature.geometry())
            copy.setAttributes(list(feature.attributes()) + [float(value) if math.isfinite(value) else None
                                                             for value in values])
            self.sink.add(copy)
