"""Toolbox algorithm 'Cross-validate model' (fieldcast:crossvalidate)."""
from __future__ import annotations

import math

import numpy as np
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsFeature,
    QgsFeatureRequest,
    QgsField,
    QgsFields,
    QgsGeometry,
    QgsPointXY,
    QgsProcessingException,
    QgsProcessingOutputNumber,
    QgsProcessingParameterFeatureSink,
    QgsWkbTypes,
)

from ..algorithms import (
    CrossValidation,
    ModelDocument,
    cross_validate_with,
    parse_crs,
)
from .algorithm_base import FieldcastAlgorithm, progress_callback, push_log
from .field_names import free_names
from .field_types import field_type
from .help_text import (
    COVARIATE_HELP,
    ERROR_VARIANCE_HELP,
    LOCAL_MEAN_HELP,
    MODEL_FILE_HELP,
    NONDETECT_HELP,
    NUGGET_HELP,
    TARGET_CRS_HELP,
    compose_help,
)
from .report.crossvalidation_report import write_crossvalidation_report
from .sample_reader import ModelSamples
from .sinks import checked_sink

SUMMARY_OUTPUTS = (
    ("ME", "Mean error (modelling units)"),
    ("RMSE", "Root mean squared error (modelling units)"),
    ("MSDR", "Mean squared standardised residual"),
    ("COVERAGE95", "Share of samples inside their 95 % interval"),
    ("ME_ATTRIBUTE", "Mean error (attribute units)"),
    ("RMSE_ATTRIBUTE", "Root mean squared error (attribute units)"),
)
RESULT_FIELDS = ("cv_observed", "cv_predicted", "cv_std_error", "cv_error", "cv_z_score")
"""The modelling-scale result fields, after the input's own fields and ``cv_feature_id``."""
ATTRIBUTE_FIELDS = ("cv_observed_value", "cv_predicted_value", "cv_error_value")
"""The attribute-unit result fields a log model adds (see :meth:`CrossValidation.attribute_values`)."""


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
         *COVARIATE_HELP,
         *NONDETECT_HELP,
         ("Neighbours per sample", "0 (the default): each sample is predicted from all the others (global "
          "kriging, computed in closed form), up to 5,000 samples; with more, each sample from its 64 nearest others "
          "and the log says so. A number k: from its k nearest other samples (local kriging; 16 to "
          "64 is common practice), as 'Predict surface' does with the same setting; check a model here with the "
          "neighbours you will map with. It must be more than the number of trend terms (at least 2 for a "
          "constant mean)."),
         ("Search radius", "With local kriging only: other samples farther than this (working CRS units, along "
          "the major axis; the search ellipse follows the model's anisotropy) are left out. Samples with too few "
          "others in range get no prediction (empty fields), are left out of the summary and the report, and the "
          "log says how many. Empty: no limit."),
         NUGGET_HELP,
         ERROR_VARIANCE_HELP,
         LOCAL_MEAN_HELP,
         TARGET_CRS_HELP],
        [("Cross-validation points", "One point per sample (per location, where samples at one location were "
          "averaged) with the input layer's own fields (those of the first sample at the location), then "
          "cv_feature_id (its feature id), cv_observed, cv_predicted (the kriging prediction from the other "
          "samples), cv_std_error (the prediction standard error of the observation, nugget included), cv_error "
          "(cv_observed - cv_predicted) and cv_z_score (cv_error / cv_std_error; ideally standard normal). These "
          "are in the modelling scale: for a log model natural logs of value + offset. A log model adds "
          "cv_observed_value, cv_predicted_value (exp(cv_predicted) - offset, the median of the lognormal "
          "prediction) and cv_error_value in attribute units. A name the input already uses gets _2 appended."),
         ("Cross-validation report", "HTML page (a temporary file unless you name one or skip it): the four "
          "numbers below with their ideal values, a rough band and how to read them (for a log model also ME and "
          "RMSE in attribute units), observed against predicted (for a log model also in attribute units), a "
          "map and a histogram of the standardised residuals, the worst-predicted samples and the "
          "model checked. Read it before trusting a map made with this model."),
         ("ME", "Mean residual; near 0 when predictions are unbiased."),
         ("RMSE", "Root mean squared residual, the typical prediction error (modelling units)."),
         ("MSDR", "Mean squared standardised residual; near 1 when the variances are right, above 1 when the "
          "model is over-confident."),
         ("COVERAGE95", "Share of samples within 1.96 standard errors of their prediction; near 0.95 when the "
          "uncertainty is right."),
         ("ME_ATTRIBUTE / RMSE_ATTRIBUTE", "Mean and root mean squared error in attribute units (e.g. ppm): "
          "observed value minus the prediction back-transformed to the median (exp(mu) - offset) for a log model; "
          "the same as ME and RMSE without a transform. The median is below the lognormal mean, so for a log model "
          "ME_ATTRIBUTE is usually positive.")],
    )

    def initAlgorithm(self, config=None):
        self.add_sample_parameters()
        self.add_model_parameter()
        self.add_covariate_parameters()
        self.add_nondetect_parameters()
        self.add_neighbourhood_parameters("sample")
        self.add_measurement_parameters()
        self.add_target_crs_parameter()
        self.addParameter(QgsProcessingParameterFeatureSink(self.OUTPUT, self.tr("Cross-validation points")))
        self.add_report_parameter(self.tr("Cross-validation report"))
        for name, description in SUMMARY_OUTPUTS:
            self.addOutput(QgsProcessingOutputNumber(name, self.tr(description)))

    def compute(self, parameters, context, feedback) -> dict:
        report_path = self.report_destination(parameters, context)
        document, samples = self.model_and_samples(parameters, context, feedback, progress_callback(feedback, 0, 80))
        if samples.sets is not None:
            feedback.pushWarning(f"The {int(np.count_nonzero(np.ptp(samples.sets, axis=0)))} sample(s) "
                                 "below a limit are predicted against their conditional mean below the limit, not a "
                                 "measured value: their errors and the statistics that include them are model-based.")
        result = self.cross_validation(parameters, context, feedback, document, samples)
        summary = {**result.summary(), **result.attribute_summary(document.transform)}
        feedback.pushInfo("Leave-one-out on {n} samples: ME {ME:.4g}, RMSE {RMSE:.4g}, MSDR {MSDR:.4g}, "
                          "COVERAGE95 {COVERAGE95:.3f}.".format(**summary))
        if document.transform.kind != "none":
            feedback.pushInfo("In attribute units (predictions back-transformed to the median): ME {ME_ATTRIBUTE:.4g}, "
                              "RMSE {RMSE_ATTRIBUTE:.4g}.".format(**summary))
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
        """The cross-validation points layer, one feature per sample with the input's own fields first; written
        last, after the report is staged."""
        source = self.parameterAsSource(parameters, self.INPUT, context)
        if source is None:
            raise QgsProcessingException(self.invalidSourceError(parameters, self.INPUT))
        fids = [int(fid) for fid in samples.fids]
        request = QgsFeatureRequest().setFilterFids(fids).setFlags(QgsFeatureRequest.NoGeometry)
        inputs = {feature.id(): feature.attributes() for feature in source.getFeatures(request)}
        columns = result.sample_columns(document.transform)
        names = free_names(["cv_feature_id", *RESULT_FIELDS, *ATTRIBUTE_FIELDS][:len(columns) + 1],
                           source.fields().names())
        fields = QgsFields(source.fields())
        fields.append(QgsField(names[0], field_type("LongLong")))
        for name in names[1:]:
            fields.append(QgsField(name, field_type("Double")))
        with checked_sink(self, parameters, self.OUTPUT, context, fields, QgsWkbTypes.Point,
                          QgsCoordinateReferenceSystem.fromWkt(document.crs_wkt)) as sink:
            for row, (fid, (x, y)) in enumerate(zip(fids, samples.xy)):
                feature = QgsFeature(fields)
                feature.setGeometry(QgsGeometry.fromPointXY(QgsPointXY(float(x), float(y))))
                feature.setAttributes(list(inputs[fid]) + [fid] + [float(column[row]) if math.isfinite(column[row])
                                                                   else None for column in columns])
                sink.add(feature)
        return sink.destination

    def cross_validation(self, parameters, context, feedback, document: ModelDocument,
                         samples: ModelSamples) -> CrossValidation:
        """Global (closed form) or local leave-one-out by NEIGHBOURS and SEARCH_RADIUS, the engine's choice logged."""
        result, lines = cross_validate_with(samples.xy, samples.values, document.covariance, document.mean,
                                            self.neighbourhood(parameters, context), covariates=samples.covariates,
                                            units=document.units, error_variance=samples.error_variance,
                                            progress=progress_callback(feedback, 80, 95),
                                            should_stop=feedback.isCanceled)
        push_log(feedback, lines)
        return result
