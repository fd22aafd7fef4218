"""Toolbox algorithm 'Cross-validate model' (fieldcast:crossvalidate)."""
from __future__ import annotations

import math

import numpy as np
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsFeature,
    QgsField,
    QgsFields,
    QgsGeometry,
    QgsPointXY,
    QgsProcessingOutputNumber,
    QgsProcessingParameterFeatureSink,
    QgsWkbTypes,
)

from ..algorithms import (
    CrossValidation,
    FieldcastError,
    ModelDocument,
    leave_one_out,
    local_leave_one_out,
    parse_crs,
    search_words,
)
from .algorithm_base import FieldcastAlgorithm, progress_callback, push_log
from .field_types import field_type
from .help_text import MODEL_FILE_HELP, TARGET_CRS_HELP, compose_help
from .report.crossvalidation_report import write_crossvalidation_report
from .sample_reader import ModelSamples
from .sinks import checked_sink

SUMMARY_OUTPUTS = (
    ("ME", "Mean error (modelling units)"),
    ("RMSE", "Root mean squared error (modelling units)"),
    ("MSDR", "Mean squared standardised residual"),
    ("COVERAGE95", "Share of samples inside their 95 % interval"),
)
RESULT_FIELDS = ("observed", "predicted", "variance", "residual", "stdresid")


class CrossValidateAlgorithm(FieldcastAlgorithm):
    """Leave-one-out cross-validation of a model on the samples it describes."""

    OUTPUT = "OUTPUT"
    ICON = "crossvalidate.svg"

    NAME = "crossvalidate"
    DISPLAY_NAME = "Cross-validate model"
    HELP = compose_help(
        "Leaves each sample out in turn, predicts it by kriging from the others with the model (all of them, or "
        "its nearest ones), and compares: a check of the model's predictions and of its stated uncertainty.",
        [("Sample points / Value field", "The samples to check (NULL values skipped, samples at one "
          "location averaged)."),
         MODEL_FILE_HELP,
         ("Neighbours per sample", "0 (the default): each sample is predicted from all the others (global "
          "kriging, computed in closed form). A number k: from its k nearest other samples (local kriging; 16 to "
          "64 is common practice), as 'Predict surface' does with the same setting; check a model here with the "
          "neighbours you will map with. It must be more than the number of trend terms (at least 2 for a "
          "constant mean)."),
         ("Search radius", "With local kriging only: other samples farther than this (working CRS units, along "
          "the major axis; the search ellipse follows the model's anisotropy) are left out. Samples with too few "
          "others in range get no prediction (empty fields), are left out of the summary and the report, and the "
          "log says how many. Empty: no limit."),
         TARGET_CRS_HELP],
        [("Cross-validation points", "One point per sample with sample_id (feature id), observed, predicted, "
          "variance (prediction-error variance of the observation, nugget included), residual (observed - "
          "predicted) and stdresid (residual / sqrt(variance)). All in the modelling scale: for a log model "
          "these are natural logs of value + offset."),
         ("Cross-validation report", "HTML page (a temporary file unless you name one or skip it): the four "
          "numbers below with their ideal values, a rough band and how to read them, observed against "
          "predicted, a map and a histogram of the standardised residuals, the worst-predicted samples and the "
          "model checked. Read it before trusting a map made with this model."),
         ("ME", "Mean residual; near 0 when predictions are unbiased."),
         ("RMSE", "Root mean squared residual, the typical prediction error (modelling units)."),
         ("MSDR", "Mean squared standardised residual; near 1 when the variances are right, above 1 when the "
          "model is over-confident."),
         ("COVERAGE95", "Share of samples within 1.96 standard errors of their prediction; near 0.95 when the "
          "uncertainty is right.")],
    )

    def initAlgorithm(self, config=None):
        self.add_sample_parameters()
        self.add_model_parameter()
        self.add_neighbourhood_parameters("sample")
        self.add_target_crs_parameter()
        self.addParameter(QgsProcessingParameterFeatureSink(self.OUTPUT, self.tr("Cross-validation points")))
        self.add_report_parameter(self.tr("Cross-validation report"))
        for name, description in SUMMARY_OUTPUTS:
            self.addOutput(QgsProcessingOutputNumber(name, self.tr(description)))

    def compute(self, parameters, context, feedback) -> dict:
        report_path = self.report_destination(parameters, context)
        document, samples = self.model_and_samples(parameters, context, feedback, progress_callback(feedback, 0, 80))
        result = self.cross_validation(parameters, context, feedback, document, samples)
        summary = result.summary()
        feedback.pushInfo("Leave-one-out on {n} samples: ME {ME:.4g}, RMSE {RMSE:.4g}, MSDR {MSDR:.4g}, "
                          "COVERAGE95 {COVERAGE95:.3f}.".format(**summary))
        outputs = {name: summary[name] for name, _ in SUMMARY_OUTPUTS}
        if report_path:
            rows = result.resolved_rows
            write_crossvalidation_report(report_path, cv=result.resolved(), ids=np.asarray(samples.fids)[rows],
                                         xy=samples.xy[rows], model=document,
                                         crs_name=parse_crs(document.crs_wkt).name)
            outputs[self.OUTPUT_REPORT] = report_path
        outputs[self.OUTPUT] = self.write_points(parameters, context, document, samples, result)
        feedback.setProgress(100)
        return outputs

    def write_points(self, parameters, context, document: ModelDocument, samples: ModelSamples,
                     result: CrossValidation) -> str:
        """The cross-validation points layer, one feature per sample; written last, after the report is staged."""
        fields = QgsFields()
        fields.append(QgsField("sample_id", field_type("LongLong")))
        for name in RESULT_FIELDS:
            fields.append(QgsField(name, field_type("Double")))
        columns = (result.observed, result.predicted, result.variance, result.residual, result.standardized)
        with checked_sink(self, parameters, self.OUTPUT, context, fields, QgsWkbTypes.Point,
                          QgsCoordinateReferenceSystem.fromWkt(document.crs_wkt)) as sink:
            for row, (fid, (x, y)) in enumerate(zip(samples.fids, samples.xy)):
                feature = QgsFeature(fields)
                feature.setGeometry(QgsGeometry.fromPointXY(QgsPointXY(float(x), float(y))))
                feature.setAttributes([int(fid)] + [float(column[row]) if math.isfinite(column[row]) else None
                                                    for column in columns])
                sink.add(feature)
        return sink.destination

    def cross_validation(self, parameters, context, feedback, document: ModelDocument,
                         samples: ModelSamples) -> CrossValidation:
        """Global (closed form) or local leave-one-out by NEIGHBOURS and SEARCH_RADIUS, the choice logged."""
        neighbourhood = self.neighbourhood(parameters, context)
        neighbours, lines = neighbourhood.resolved(document.mean, "sample", pool="every other sample")
        push_log(feedback, lines)
        if neighbours == 0:
            return leave_one_out(samples.xy, samples.values, document.covariance, document.mean)
        search_radius = neighbourhood.search_radius
        feedback.pushInfo(f"Local leave-one-out: each sample from its {min(neighbours, len(samples.values) - 1)} "
                          f"nearest other samples{search_words(search_radius, document.units)}.")
        result = local_leave_one_out(samples.xy, samples.values, document.covariance, document.mean,
                                     neighbours=neighbours, search_radius=search_radius,
                                     progress=progress_callback(feedback, 80, 95), should_stop=feedback.isCanceled)
        unresolved = len(result.residual) - result.summary()["n"]
        if unresolved == len(result.residual):
            raise FieldcastError("No sample has enough other samples within SEARCH_RADIUS to be predicted. "
                                 "Enlarge SEARCH_RADIUS, or leave it empty.")
        if unresolved:
            feedback.pushWarning(f"{unresolved:,} sample(s) have too few other samples within SEARCH_RADIUS (or "
                                 "neighbours that make a singular system): they get no prediction and are left "
                                 "out of the summary. Enlarge SEARCH_RADIUS, or leave it empty, to include them.")
        return result
