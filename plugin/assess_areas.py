"""Toolbox algorithm 'Assess areas' (fieldcast:assessareas)."""
from __future__ import annotations

import math

import numpy as np
from qgis.core import (
    QgsFeature,
    QgsField,
    QgsFields,
    QgsProcessing,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterField,
    QgsProcessingParameterNumber,
)

from ..algorithms import AREA_FIELDS, FieldcastError, assess_areas, linear_units
from .algorithm_base import FieldcastAlgorithm, advanced, log_spread, progress_callback, push_log
from .destinations import destination_value
from .field_names import name_limit, result_names
from .field_types import field_type
from .help_text import (
    AREA_CAUTIONS,
    COVARIATE_HELP,
    ERROR_VARIANCE_HELP,
    MODEL_FILE_HELP,
    NONDETECT_HELP,
    NUGGET_HELP,
    TARGET_CRS_HELP,
    compose_help,
)
from .polygon_reader import working_polygons
from .sinks import checked_sink
from .whole_numbers import whole_number

SUFFIXES = {"mean": "mean", "sd": "sd", "pexc": "pexc", "p10": "p10", "p50": "p50", "p90": "p90", "area": "area",
            "share_above": "above", "volume_p10": "vol10", "volume_p50": "vol50", "volume_p90": "vol90"}
"""The result field of each engine quantity: ``<FIELD>_<suffix>``; ``<FIELD>_ctr`` flags a centroid-only unit."""
VOLUMES = ("volume_p10", "volume_p50", "volume_p90")


class AssessAreasAlgorithm(FieldcastAlgorithm):
    """Per polygon: the expected arithmetic average, its spread and exceedance, the share and volume above a limit."""

    AREAS = "AREAS"
    DEPTH_FIELD = "DEPTH_FIELD"
    DEPTH = "DEPTH"
    REALIZATIONS = "REALIZATIONS"
    SEED = "SEED"
    OUTPUT = "OUTPUT"
    ICON = "assessareas.svg"

    NAME = "assessareas"
    DISPLAY_NAME = "Assess areas"
    HELP = compose_help(
        "For each polygon of a layer (remediation units, parcels, fields) estimates the average of the attribute "
        "over the polygon in the attribute's own units, how uncertain that average is, the probability that it "
        "exceeds a limit, and the share of the polygon (and, with a depth, the volume) expected above the limit. "
        + AREA_CAUTIONS,
        [("Sample points / Value field", "The samples to predict from (the same kind the model was fitted to)."),
         MODEL_FILE_HELP,
         *COVARIATE_HELP,
         *NONDETECT_HELP,
         ("Polygons to assess", "Polygon layer of the units (AREAS), in any CRS: polygons are reprojected to the "
          "working CRS; holes and multipart polygons are respected. Each is covered by about 64 regular points "
          "(spacing sqrt(area / 64), at most 400 points; the log states the spacings). A polygon too small or thin "
          "for any point gets its centroid, and FIELD_ctr = 1."),
         ("Threshold", "The limit in the attribute's own units (e.g. 3 for 3 ppm), also for a log model. Required."),
         ("Number of realisations", "Draws of each polygon's points from their joint law given the data: they give "
          "the exceedance probability and percentiles of a log model's average and the volume percentiles "
          "(1,000, the default, keeps the Monte Carlo error of a probability below about 0.016)."),
         ("Random seed", "Seed of the draws; the same seed gives the same results."),
         ("Depth field", "Optional field of the polygon layer with each unit's depth or thickness, for volumes "
          "(depth units times the working CRS's area units)."),
         ("Depth", "Optional constant depth or thickness for every unit, instead of a depth field."),
         NUGGET_HELP,
         ERROR_VARIANCE_HELP,
         TARGET_CRS_HELP],
        [("Assessed areas", "A copy of the polygon layer (its geometry, CRS and every field) with, for the value "
          "field FIELD: FIELD_mean, the expected arithmetic average over the polygon in attribute units (for a log "
          "model the exact lognormal expectation, not the back-transformed average of logs); FIELD_sd, its standard "
          "deviation; FIELD_pexc, the probability that the polygon's average exceeds the threshold; FIELD_p10, "
          "FIELD_p50, FIELD_p90, percentiles of the average; FIELD_area, the polygon's area in the working CRS "
          "(units squared); FIELD_above, the share of its area expected above the threshold; with a depth "
          "FIELD_vol10, FIELD_vol50, FIELD_vol90, percentiles of the volume above the threshold; FIELD_ctr, 1 for a "
          "polygon kriged at its centroid. How to read them: FIELD_pexc = 0.8 means that under the model 8 in 10 "
          "units like this one would have an average above the limit; a unit with FIELD_pexc near 0.5 is "
          "undecided and is where more samples help most. Names the layer already has get _2, _3, ...")],
    )

    def initAlgorithm(self, config=None):
        self.add_sample_parameters()
        self.add_model_parameter()
        self.add_covariate_parameters()
        self.add_nondetect_parameters()
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.AREAS, self.tr("Polygons to assess"), [QgsProcessing.TypeVectorPolygon]))
        self.addParameter(QgsProcessingParameterNumber(
            self.THRESHOLD, self.tr("Threshold (attribute units)"), type=QgsProcessingParameterNumber.Double,
            optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            self.REALIZATIONS, self.tr("Number of realisations"), type=QgsProcessingParameterNumber.Integer,
            defaultValue=1000, minValue=10))
        self.addParameter(advanced(QgsProcessingParameterNumber(
            self.SEED, self.tr("Random seed"), type=QgsProcessingParameterNumber.Integer, defaultValue=1,
            minValue=0)))
        self.addParameter(QgsProcessingParameterField(
            self.DEPTH_FIELD, self.tr("Depth field"), parentLayerParameterName=self.AREAS,
            type=QgsProcessingParameterField.Numeric, optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            self.DEPTH, self.tr("Depth"), type=QgsProcessingParameterNumber.Double, optional=True, minValue=0.0))
        self.add_measurement_parameters()
        self.add_target_crs_parameter()
        self.addParameter(QgsProcessingParameterFeatureSink(
            self.OUTPUT, self.tr("Assessed areas"), QgsProcessing.TypeVectorPolygon))

    def areas(self, parameters, context):
        """The AREAS source, checked: a defined CRS and at least one feature."""
        return self.feature_source(parameters, self.AREAS, context, "The polygon layer (AREAS) is empty. Choose a "
                                   "layer that holds the units to assess.")

    def depth_of(self, parameters, context):
        """A function giving a feature's depth (NaN for none), from DEPTH_FIELD or DEPTH; None without either."""
        depth_field = self.parameterAsString(parameters, self.DEPTH_FIELD, context)
        depth = self.optional_number(parameters, self.DEPTH, context)
        if depth_field and depth is not None:
            raise FieldcastError("Give a depth field (DEPTH_FIELD) or a constant depth (DEPTH), not both.")
        if depth is not None:
            return lambda feature: depth
        if depth_field:
            return lambda feature: _depth_value(feature[depth_field])
        return None

    def compute(self, parameters, context, feedback) -> dict:
        threshold = self.optional_number(parameters, self.THRESHOLD, context)
        if threshold is None:
            raise FieldcastError("Set THRESHOLD to the limit in the attribute's units: every result compares the "
                                 "polygons with it.")
        count = whole_number(self.given_value(parameters, self.REALIZATIONS), "REALIZATIONS (number of realisations)",
                             10)
        seed = whole_number(self.given_value(parameters, self.SEED), "SEED (random seed)", 0)
        source = self.areas(parameters, context)
        depth_of = self.depth_of(parameters, context)
        kinds = [kind for kind in AREA_FIELDS if depth_of is not None or kind not in VOLUMES]
        field = self.parameterAsString(parameters, self.FIELD, context)
        names, renamed = result_names(field, [SUFFIXES[kind] for kind in kinds] + ["ctr"], source.fields().names(),
                                      name_limit(destination_value(parameters.get(self.OUTPUT))))
        if renamed:
            feedback.pushInfo(renamed)
        document, samples = self.model_and_samples(parameters, context, feedback, progress_callback(feedback, 0, 20),
                                                   spread_included=True)
        if samples.sets is not None:
            log_spread(feedback, True)
        sources = self.covariate_sources(parameters, context)
        features, polygons = working_polygons(source, document.crs_wkt, context)
        depths = [math.nan if depth_of is None else depth_of(features[index]) for index, _ in polygons]
        covariates_at = None
        if sources:
            def covariates_at(xy):
                return document.covariates.at_points(sources, xy, document.crs_wkt)
        result = assess_areas(
            samples.xy, samples.values, document.covariance, document.mean, document.transform,
            [wkb for _, wkb in polygons], threshold, realisations=count, seed=seed, depths=np.array(depths),
            covariates=samples.covariates, covariates_at=covariates_at, error_variance=samples.error_variance,
            value_sets=samples.sets,
            progress=progress_callback(feedback, 20, 90), should_stop=feedback.isCanceled)
        push_log(feedback, result.log_lines(linear_units(document.crs_wkt)))
        rows = {index: position for position, (index, _) in enumerate(polygons)}
        fields = QgsFields(source.fields())
        for name in names[:-1]:
            fields.append(QgsField(name, field_type("Double")))
        fields.append(QgsField(names[-1], field_type("Int")))
        with checked_sink(self, parameters, self.OUTPUT, context, fields, source.wkbType(),
                          source.sourceCrs()) as sink:
            for index, feature in enumerate(features):
                row = rows.get(index)
                values = [None] * len(names) if row is None else [
                    *(_number(result.values[kind][row]) for kind in kinds), int(result.centroid_only[row])]
                copy = QgsFeature(fields)
                copy.setGeometry(feature.geometry())
                copy.setAttributes(list(feature.attributes()) + values)
                sink.add(copy)
        if len(features) > len(polygons):
            feedback.pushWarning(f"{len(features) - len(polygons):,} polygon(s) have no geometry: they are copied "
                                 "with empty (NULL) results.")
        feedback.setProgress(100)
        return {self.OUTPUT: sink.destination}


def _number(value: float) -> float | None:
    return float(value) if math.isfinite(value) else None


def _depth_value(value) -> float:
    """A depth field's value as a number (NULL = no depth); a negative depth refused."""
    try:
        depth = float(value)
    except (TypeError, ValueError):
        return math.nan
    if depth < 0:
        raise FieldcastError(f"A depth in DEPTH_FIELD is negative ({depth:g}); fix it, or leave DEPTH_FIELD empty.")
    return depth
