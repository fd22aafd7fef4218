"""Toolbox algorithm 'Fit covariance model' (fieldcast:fitmodel)."""
from __future__ import annotations

from collections.abc import Mapping

from qgis.core import (
    QgsProcessingFeedback,
    QgsProcessingOutputNumber,
    QgsProcessingOutputString,
    QgsProcessingParameterFileDestination,
)

from ..algorithms import (
    FieldcastError,
    FieldcastUsageError,
    FitResult,
    ModelDocument,
    candidate_rmse,
    parse_crs,
    residual_semivariograms,
)
from .algorithm_base import FieldcastAlgorithm, progress_callback
from .help_text import (
    COVARIATE_HELP,
    ERROR_VARIANCE_HELP,
    FIT_HELP,
    NONDETECT_HELP,
    NUGGET_HELP,
    TARGET_CRS_HELP,
    compose_help,
)
from .model_source import fit_document, log_fit
from .report.fit_report import write_fit_report
from .sample_reader import ModelSamples, prepare_samples

NUMBER_OUTPUTS = (
    ("PARTIAL_SILL", "Partial sill (modelling units squared)"),
    ("RANGE", "Range along the major axis (working CRS units)"),
    ("EFFECTIVE_RANGE", "Effective range along the major axis, where correlation falls to 0.05 (working CRS units)"),
    ("NUGGET", "Nugget (modelling units squared)"),
    ("AZIMUTH", "Azimuth of the major axis (degrees clockwise from north)"),
    ("RATIO", "Anisotropy ratio (minor / major range)"),
    ("LOG_LIKELIHOOD", "Log-likelihood"),
    ("AIC", "AIC"),
)

FIT_PERCENT_WITH_REPORT = 80.0
"""Share of the progress bar (percent) the fit takes when a report is asked for; the report's
leave-one-out runs of the candidate models fill the rest."""


def fit_report_arguments(samples: ModelSamples, skipped: Mapping[str, int], result: FitResult,
                         document: ModelDocument, feedback: QgsProcessingFeedback) -> dict:
    """Everything :func:`.report.fit_report.write_fit_report` takes besides the path.

    The semivariograms (omnidirectional, and at 0, 45, 90 and 135 degrees) are of the residuals
    ``values - F beta`` from the fitted mean (trend and covariates), in the modelling scale. Each candidate model is
    cross-validated by leave-one-out with the fitted mean kind, for its RMSE (modelling units), with
    progress from :data:`FIT_PERCENT_WITH_REPORT` to 99 %; a cancel is asked before each candidate.
    Too few samples for leave-one-out leave the RMSE column empty, with a warning.

    Raises
    ------
    Cancelled
        When the user cancels.
    """
    residuals = result.mean.residuals(samples.xy, samples.values, result.coefficients, samples.covariates)
    variograms = residual_semivariograms(samples.xy, residuals)
    try:
        loo_rmse = candidate_rmse(samples.xy, samples.values, [c.covariance for c in result.candidates],
                                  result.mean, covariates=samples.covariates,
                                  progress=progress_callback(feedback, FIT_PERCENT_WITH_REPORT, 99.0),
                                  should_stop=feedback.isCanceled, error_variance=samples.error_variance)
    except FieldcastUsageError:
        raise  # a programming error: processAlgorithm reports it as an internal error
    except FieldcastError as error:  # too few samples for leave-one-out: the report shows dashes
        feedback.pushWarning(f"The report shows no leave-one-out RMSE: {error}")
        loo_rmse = None
    return dict(samples=samples.engine_samples(), fit=result, model=document, variograms=variograms,
                crs_name=parse_crs(document.crs_wkt).name, skipped=skipped, candidate_loo_rmse=loo_rmse)


class FitModelAlgorithm(FieldcastAlgorithm):
    """Fit a covariance model (nugget, family, range, anisotropy, trend) to point samples."""

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
         *COVARIATE_HELP,
         *NONDETECT_HELP,
         *FIT_HELP,
         NUGGET_HELP,
         ERROR_VARIANCE_HELP,
         TARGET_CRS_HELP],
        [("Model file", "JSON file with the fitted model, its CRS, transform and fit statistics."),
         ("Log", "The chosen model in words (family, anisotropy, effective range), every candidate with its AIC "
          "and ΔAIC (the difference from the lowest AIC), the cell declustering of the samples (declustered mean; a "
          "warning when the sampling is strongly clustered), and the fit warnings."),
         ("Fit report", "HTML page (a temporary file unless you name one or skip it): the samples "
          "used and left out, their histogram and map, their declustered mean and histogram, the empirical "
          "semivariogram of the residuals from the mean "
          "in all directions and in four, with the fitted model drawn over it, every candidate model with its AIC "
          "and leave-one-out RMSE and the chosen one marked, the parameters in words, and the fit warnings. Read "
          "it before trusting a map made with this model. The model file and the report are written only when "
          "all the computing is done: cancelling leaves neither."),
         ("Numbers", "Family, partial sill, range and effective range (working CRS units, e.g. metres), nugget, "
          "azimuth (degrees), ratio of the first structure, log-likelihood and AIC, in the modelling scale "
          "(after the transform). Fit warnings appear in the log.")],
    )

    def initAlgorithm(self, config=None):
        self.add_sample_parameters()
        self.add_covariate_parameters()
        self.add_fit_parameters()
        self.add_measurement_parameters()
        self.add_nondetect_parameters()
        self.add_target_crs_parameter()
        self.addParameter(QgsProcessingParameterFileDestination(
            self.OUTPUT_MODEL, self.tr("Model file"), self.tr("Fieldcast model (*.json)")))
        self.add_report_parameter(self.tr("Fit report"))
        for name, description in NUMBER_OUTPUTS:
            self.addOutput(QgsProcessingOutputNumber(name, self.tr(description)))
        self.addOutput(QgsProcessingOutputString("FAMILY", self.tr("Covariance family of the first structure")))

    def compute(self, parameters, context, feedback) -> dict:
        transform, settings = self.fit_choices(parameters, context)
        report_path = self.report_destination(parameters, context)
        sources = self.covariate_sources(parameters, context)
        layer_samples = self.read_samples(parameters, context, feedback)
        transform, declustering = self.complete_transform(layer_samples, transform, settings, sources, feedback)
        nondetects = self.nondetects(parameters, context)
        samples, covariates = self.fit_covariates(prepare_samples(layer_samples, transform, feedback, nondetects),
                                                  sources, layer_samples.working, feedback)
        feedback.pushInfo(f"Fitting with {settings.describe()}"
                          + (f", covariates {', '.join(covariates.column_names)}." if sources else "."))
        fit_percent = FIT_PERCENT_WITH_REPORT if report_path else 99.0
        document, result = fit_document(samples.xy, samples.values, transform, layer_samples.working,
                                        layer_samples.field, settings, progress_callback(feedback, 0.0, fit_percent),
                                        feedback.isCanceled, covariates, samples.covariates, samples.error_variance,
                                        samples.error_field, samples.censored,
                                        self.censoring(layer_samples, samples, nondetects))
        log_fit(feedback, samples.xy, samples.values, result, document, columns=samples.covariates)
        report = None
        if report_path:
            feedback.pushInfo(f"Leave-one-out of the {len(result.candidates)} candidate model(s) for the report.")
            report = fit_report_arguments(samples, layer_samples.skipped, result, document, feedback)
            report.update(declustering=declustering, attribute_values=layer_samples.values)
        path = self.parameterAsFileOutput(parameters, self.OUTPUT_MODEL, context)
        document.save(path)
        outputs = {self.OUTPUT_MODEL: path}
        if report is not None:
            write_fit_report(report_path, **report)
            outputs[self.OUTPUT_REPORT] = report_path
        feedback.setProgress(100.0)
        first = document.covariance.structures[0]
        return {
            **outputs,
            "PARTIAL_SILL": first.partial_sill,
            "RANGE": first.range,
            "EFFECTIVE_RANGE": first.effective_range,
            "FAMILY": first.family,
            "NUGGET": document.covariance.nugget,
            "AZIMUTH": first.azimuth,
            "RATIO": first.ratio,
            "LOG_LIKELIHOOD": document.fit.get("log_likelihood"),
            "AIC": document.fit.get("aic"),
        }
