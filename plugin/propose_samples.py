"""Toolbox algorithm 'Propose new samples' (fieldcast:proposesamples)."""
from __future__ import annotations

import numpy as np
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsFeature,
    QgsFeatureRequest,
    QgsField,
    QgsFields,
    QgsGeometry,
    QgsPointXY,
    QgsProcessing,
    QgsProcessingException,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterNumber,
    QgsWkbTypes,
)

from ..algorithms import (
    DESIGN_CRITERIA,
    GLOBAL_SAMPLE_LIMIT,
    PAIR_BUDGET,
    FieldcastError,
    KrigingPredictor,
    Region,
    defined_crs,
    propose_samples,
)
from .algorithm_base import FieldcastAlgorithm, progress_callback
from .field_types import field_type
from .help_text import COVARIATE_HELP, DESIGN_CAUTION, MODEL_FILE_HELP, TARGET_CRS_HELP, compose_help
from .sample_reader import crs_wkt, feature_point
from .sinks import checked_sink

EVALUATION_POINTS = 2000
"""Points of the lattice that discretises REGION for the criterion (fewer with many candidates)."""
CANDIDATE_POINTS = 2500
"""Points of the candidate lattice inside REGION when no CANDIDATES layer is given."""
FIELDS = (("pick", "Int"), ("criterion", "Double"), ("x", "Double"), ("y", "Double"))
"""The output's fields: order of choice, the criterion after the addition, the working-CRS coordinates."""


class ProposeSamplesAlgorithm(FieldcastAlgorithm):
    """Propose where to take the next samples: greedy choice that lowers the mean variance or misclassification."""

    REGION = "REGION"
    COUNT = "COUNT"
    CANDIDATES = "CANDIDATES"
    MIN_SPACING = "MIN_SPACING"
    CRITERION = "CRITERION"
    OUTPUT = "OUTPUT"
    ICON = "proposesamples.svg"

    NAME = "proposesamples"
    DISPLAY_NAME = "Propose new samples"
    HELP = compose_help(
        "Proposes where to take the next samples inside a region, one place after another: each place is the "
        "one that lowers the chosen criterion most given the samples and the places chosen before it (greedy "
        "choice; the kriging system is updated by one rank per place). " + DESIGN_CAUTION,
        [("Sample points / Value field", "The samples taken so far (the same kind the model was fitted to)."),
         MODEL_FILE_HELP,
         *COVARIATE_HELP,
         ("Region", "Polygon layer: where new samples may go. The criterion is averaged over a regular lattice "
          "of points inside it (its spacing is in the log)."),
         ("Number of new samples", "How many places to propose (COUNT), at least 1."),
         ("Candidate places", "Optional point layer of the places a sample may go (accessible ones, say). "
          "Points outside the region are left out and counted. Empty: a regular lattice inside the region (its "
          "spacing is in the log)."),
         ("Minimum spacing", "Least distance of a proposal to every sample and to the other proposals, in "
          "working CRS units (0 = none)."),
         ("Criterion", "variance: lower the mean kriging variance over the region. The kriging variance does "
          "not depend on the measured values, so this design is exact for the model. classification: lower the "
          "expected misclassification against the threshold, the mean over the region of p (1 - p) with p the "
          "probability of exceeding it, averaged over the values the new samples may take; it uses the current "
          "map, so it is only as good as the current predictions."),
         ("Threshold", "For the classification criterion: a limit in the attribute's own units (e.g. 500 for "
          "500 ppm), also for a log model: the tool transforms it the same way as the data."),
         TARGET_CRS_HELP],
        [("Proposed samples", "Point layer in the working CRS, one point per proposal: pick, the order of "
          "choice (1 first); criterion, the criterion after adding this place and those before it (mean "
          "kriging variance in the modelling scale, squared units; or mean expected misclassification, a "
          "probability); x and y, its working-CRS coordinates. The log gives the criterion now and after all "
          "proposals.")],
    )

    def initAlgorithm(self, config=None):
        self.add_sample_parameters()
        self.add_model_parameter()
        self.add_covariate_parameters()
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.REGION, self.tr("Region (polygons where new samples may go)"), [QgsProcessing.TypeVectorPolygon]))
        self.addParameter(QgsProcessingParameterNumber(
            self.COUNT, self.tr("Number of new samples"), type=QgsProcessingParameterNumber.Integer,
            defaultValue=10, minValue=1))
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.CANDIDATES, self.tr("Candidate places (optional points; empty = a lattice in the region)"),
            [QgsProcessing.TypeVectorPoint], optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            self.MIN_SPACING, self.tr("Minimum spacing (working CRS units)"),
            type=QgsProcessingParameterNumber.Double, defaultValue=0.0, minValue=0.0))
        self.add_choice(self.CRITERION, self.tr("Criterion"), DESIGN_CRITERIA, "variance")
        self.add_threshold_parameter()
        self.add_target_crs_parameter()
        self.addParameter(QgsProcessingParameterFeatureSink(
            self.OUTPUT, self.tr("Proposed samples"), QgsProcessing.TypeVectorPoint))

    def checkParameterValues(self, parameters, context):
        """Refuse the classification criterion without a threshold, before any work."""
        if self.choice(parameters, self.CRITERION, context) == "classification" and \
                self.optional_number(parameters, self.THRESHOLD, context) is None:
            return False, ("The classification criterion needs a Threshold (THRESHOLD, attribute units). Give one, "
                           "or set CRITERION to variance.")
        return super().checkParameterValues(parameters, context)

    def layer_points(self, parameters, name: str, context, working: QgsCoordinateReferenceSystem) -> tuple:
        """The features of layer parameter ``name`` in the working CRS: (source, geometries); None when not given."""
        source = self.parameterAsSource(parameters, name, context)
        if source is None:
            if parameters.get(name) in (None, ""):
                return None, []
            raise QgsProcessingException(self.invalidSourceError(parameters, name))
        defined_crs(crs_wkt(source.sourceCrs()), f"{source.sourceName()} ({name})")
        request = QgsFeatureRequest().setNoAttributes().setDestinationCrs(working, context.transformContext())
        return source, [feature for feature in source.getFeatures(request) if not feature.geometry().isEmpty()]

    def candidates(self, parameters, context, region: Region, working, feedback) -> np.ndarray:
        """CANDIDATES inside the region (the others counted), or a lattice inside it."""
        source, features = self.layer_points(parameters, self.CANDIDATES, context, working)
        if source is None:
            xy, spacing = region.lattice(CANDIDATE_POINTS)
            feedback.pushInfo(f"Candidate places: {len(xy):,} points of a lattice inside the region, "
                              f"{spacing:,.4g} working CRS units apart.")
            return xy
        name = f"the candidate layer {source.sourceName()}"
        xy = np.array([point for feature in features
                       if (point := feature_point(feature.geometry(), feature.id(), name)) is not None],
                      dtype=float).reshape(-1, 2)
        inside = region.contains(xy)
        if not inside.any():
            raise FieldcastError(f"None of the {len(xy):,} points of {source.sourceName()} (CANDIDATES) lies inside "
                                 "REGION. Choose candidate places inside the region, or another REGION.")
        if not inside.all():
            feedback.pushWarning(f"{int(np.count_nonzero(~inside)):,} of {len(xy):,} candidate places lie outside "
                                 "the region and are left out.")
        return xy[inside]

    def covariate_columns(self, document, sources, xy: np.ndarray, what: str, feedback):
        """The model's covariate columns at ``xy`` and the points that have them (all points without covariates)."""
        if not sources:
            return xy, None
        columns = document.covariates.at_points(sources, xy, document.crs_wkt)
        usable = np.all(np.isfinite(columns), axis=1)
        if not usable.all():
            feedback.pushWarning(f"{int(np.count_nonzero(~usable)):,} {what} lie where a covariate raster has no "
                                 "value (or a class no sample has) and are left out.")
        return xy[usable], columns[usable]

    def compute(self, parameters, context, feedback) -> dict:
        criterion = self.choice(parameters, self.CRITERION, context)
        count = self.parameterAsInt(parameters, self.COUNT, context)
        min_spacing = self.parameterAsDouble(parameters, self.MIN_SPACING, context)
        document, samples = self.model_and_samples(parameters, context, feedback, progress_callback(feedback, 0, 20))
        if len(samples.xy) > GLOBAL_SAMPLE_LIMIT:
            raise FieldcastError(f"The design kriges with all {len(samples.xy):,} samples, more than "
                                 f"{GLOBAL_SAMPLE_LIMIT:,}. Choose fewer samples in INPUT (those near the REGION, "
                                 "e.g. with 'Extract by location').")
        working = QgsCoordinateReferenceSystem.fromWkt(document.crs_wkt)
        source, features = self.layer_points(parameters, self.REGION, context, working)
        region = Region.from_shapes([bytes(feature.geometry().asWkb()) for feature in features],
                                    f"{source.sourceName()} (REGION)")
        sources = self.covariate_sources(parameters, context)
        candidates, candidate_columns = self.covariate_columns(
            document, sources, self.candidates(parameters, context, region, working, feedback), "candidate places",
            feedback)
        if count > len(candidates):
            raise FieldcastError(f"COUNT is {count} but there are only {len(candidates):,} candidate places in the "
                                 "region. Lower COUNT, or give more CANDIDATES (or none, for a lattice).")
        evaluation, spacing = region.lattice(max(200, min(EVALUATION_POINTS, PAIR_BUDGET // len(candidates))))
        feedback.pushInfo(f"The criterion is averaged over {len(evaluation):,} points of a lattice inside the "
                          f"region, {spacing:,.4g} working CRS units apart.")
        evaluation, evaluation_columns = self.covariate_columns(document, sources, evaluation, "evaluation points",
                                                                feedback)
        level = self.threshold_level(parameters, context, document, criterion)
        predictor = KrigingPredictor(samples.xy, samples.values, document.covariance, document.mean,
                                     samples.covariates)
        proposal = propose_samples(predictor, evaluation, candidates, count, criterion=criterion, level=level,
                                   min_spacing=min_spacing, evaluation_covariates=evaluation_columns,
                                   candidate_covariates=candidate_columns,
                                   progress=progress_callback(feedback, 20, 95), should_stop=feedback.isCanceled)
        self.log_proposal(proposal, feedback)
        fields = QgsFields()
        for name, kind in FIELDS:
            fields.append(QgsField(name, field_type(kind)))
        with checked_sink(self, parameters, self.OUTPUT, context, fields, QgsWkbTypes.Point, working) as sink:
            for order, ((x, y), after) in enumerate(zip(proposal.xy, proposal.after), start=1):
                feature = QgsFeature(fields)
                feature.setGeometry(QgsGeometry.fromPointXY(QgsPointXY(float(x), float(y))))
                feature.setAttributes([order, float(after), float(x), float(y)])
                sink.add(feature)
        feedback.setProgress(100)
        return {self.OUTPUT: sink.destination}

    def threshold_level(self, parameters, context, document, criterion: str) -> float | None:
        """THRESHOLD in the modelling scale (classification only)."""
        if criterion != "classification":
            return None
        threshold = self.optional_number(parameters, self.THRESHOLD, context)
        transform = document.transform
        if transform.positive_only and threshold + transform.offset <= 0:
            raise FieldcastError(f"THRESHOLD {threshold:g} is at or below minus the model's offset (LOG_OFFSET), so "
                                 "every place exceeds it and there is nothing to classify. Give a higher THRESHOLD.")
        return float(transform.forward(np.array([threshold]))[0])

    @staticmethod
    def log_proposal(proposal, feedback) -> None:
        """The criterion now and after all proposals, and what the design rests on."""
        if proposal.criterion == "variance":
            feedback.pushInfo(f"Mean kriging variance over the region (modelling scale): {proposal.before:.4g} now, "
                              f"{proposal.after[-1]:.4g} after the {len(proposal.picks)} proposals. The kriging "
                              "variance does not depend on the measured values, so this design is exact for the "
                              "model; it is only as good as the model.")
        else:
            feedback.pushInfo(f"Mean expected misclassification p (1 - p) over the region: {proposal.before:.4g} "
                              f"now, {proposal.after[-1]:.4g} expected after the {len(proposal.picks)} proposals. "
                              "The design uses the current map (today's predictions and the values the new samples "
                              "may take under the model); it is only as good as the model and the map.")
        feedback.pushInfo(DESIGN_CAUTION)
