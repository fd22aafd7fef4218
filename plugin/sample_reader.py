"""Point layer to sample arrays: values, locations in the working CRS, feature ids.

Reading refuses what cannot be modelled (non-numeric field, missing CRS, empty
layer, true multipoints) with a message that says what to change, skips
features whose value is NULL or NaN or that have no geometry, and counts them
(in the log and in :attr:`LayerSamples.skipped`). The layer itself is only read.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from qgis.core import QgsCoordinateReferenceSystem, QgsFeatureRequest, QgsProcessingFeatureSource
from qgis.PyQt.QtCore import QVariant

from ..algorithms import (
    FeatureReadings,
    FieldcastError,
    RasterTemplate,
    Samples,
    Transform,
    WorkingCrs,
    check_limits,
    check_samples,
    choose_working_crs,
    merge_coincident,
    minimum_pile_warning,
    parse_limit_texts,
    same_crs,
    substituted,
    transform_points,
    undefined_crs_error,
)


@dataclass(frozen=True)
class LayerSamples:
    """Samples with a value, as read from the layer (before transform and merging).

    Attributes
    ----------
    xy : ndarray (n, 2)
        Locations in the working CRS.
    values : ndarray (n,)
        Attribute values in the layer's units.
    fids : ndarray (n,)
        Feature ids.
    working : WorkingCrs
        The CRS of ``xy`` and why it was chosen.
    field : str
        Name of the attribute.
    skipped : dict of str to int
        Features left out, by reason (only reasons that occurred), e.g.
        ``{"value is NULL or not a number": 2}``.
    error_variance : ndarray (n,) or None
        Measurement-error variance of each sample from ERROR_VARIANCE_FIELD (modelling units squared), None
        without that field.
    error_field : str
        Name of that field ("" without it).
    censored : ndarray of bool (n,), optional
        True where the value is a reporting limit (the true value lies below it); None when none is.
    """

    xy: np.ndarray
    values: np.ndarray
    fids: np.ndarray
    working: WorkingCrs
    field: str
    skipped: dict[str, int]
    error_variance: np.ndarray | None = None
    error_field: str = ""
    censored: np.ndarray | None = None


@dataclass(frozen=True)
class ModelSamples:
    """Samples ready for the engine: transformed values, coincident points merged.

    ``xy`` is in the working CRS, ``values`` in the modelling scale; ``fids``
    belong to the first feature of each merged group; ``field`` names the attribute. ``merged_points``
    samples were averaged into ``merged_groups`` shared locations. ``covariates`` are the mean's covariate
    columns at the samples (None without covariates); ``error_variance`` each sample's measurement-error
    variance (merged samples: the combined one) from the field ``error_field``, None without one.
    columns at the samples (None without covariates). ``censored`` marks the samples whose value is a limit (in
    the modelling scale; None when none is, or after substitution); ``sets`` the completed data sets (m, n) whose
    mean ``values`` is, once such samples are imputed.
    """

    xy: np.ndarray
    values: np.ndarray
    fids: np.ndarray
    field: str
    merged_groups: int
    merged_points: int
    covariates: np.ndarray | None = None
    error_variance: np.ndarray | None = None
    error_field: str = ""
    censored: np.ndarray | None = None
    sets: np.ndarray | None = None

    def with_covariates(self, columns: np.ndarray, kept: np.ndarray) -> ModelSamples:
        """The samples ``kept`` (where every covariate has a value) with their covariate columns, checked again."""
        check_samples(self.xy[kept], self.values[kept])
        return ModelSamples(self.xy[kept], self.values[kept], self.fids[kept], self.field, self.merged_groups,
                            self.merged_points, columns,
                            None if self.error_variance is None else self.error_variance[kept], self.error_field,
                            None if self.censored is None else self.censored[kept])

    def with_values(self, values: np.ndarray, sets: np.ndarray | None = None) -> ModelSamples:
        """The samples with other values (e.g. the censored ones imputed) and no censored mark; ``sets`` are the
        completed data sets (m, n) those values average."""
        return ModelSamples(self.xy, values, self.fids, self.field, self.merged_groups, self.merged_points,
                            self.covariates, self.error_variance, self.error_field, sets=sets)

    def censored_count(self) -> int:
        """How many samples are limits."""
        return 0 if self.censored is None else int(self.censored.sum())

    def engine_samples(self) -> Samples:
        """The samples as the engine's :class:`Samples` (ids are the feature ids), e.g. for the fit report."""
        return Samples(self.xy, self.values, self.fids, self.merged_groups, self.merged_points,
                       error_variance=self.error_variance, censored=self.censored)


@dataclass(frozen=True)
class NonDetects:
    """How values below a limit are read and treated: ``field`` (BELOW_LIMIT_FIELD, "" for none), ``treatment``
    (NONDETECTS: "likelihood" or "substitution") and ``factor`` (SUBSTITUTION_FACTOR, the limit's multiplier)."""

    field: str = ""
    treatment: str = "likelihood"
    factor: float = 0.5


def crs_wkt(crs: QgsCoordinateReferenceSystem) -> str:
    """WKT2 text of a QGIS CRS."""
    return crs.toWkt(QgsCoordinateReferenceSystem.WKT2_2019)


def _number(value) -> float:
    """An attribute as a float; NULL and unreadable values become NaN."""
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def feature_point(geometry, fid: int, layer: str = "the sample layer") -> tuple[float, float] | None:
    """The point of a feature, None without geometry; FieldcastError for several parts (a multipoint of one
    point is that point)."""
    if geometry is None or geometry.isNull() or geometry.isEmpty():
        return None
    if geometry.isMultipart():
        parts = geometry.asMultiPoint()
        if len(parts) != 1:
            raise FieldcastError(f"Feature {fid} of {layer} is a multipoint with {len(parts)} points. Run "
                                 "'Multipart to singleparts' on the layer first, so each point is its own feature.")
        point = parts[0]
    else:
        point = geometry.asPoint()
    return point.x(), point.y()


def numeric_field_index(source: QgsProcessingFeatureSource, field: str, parameter: str) -> int:
    """The index of a numeric attribute of ``source``; FieldcastError naming ``parameter`` when it is missing or
    not numeric."""
    index = source.fields().lookupField(field)
    if index < 0:
        raise FieldcastError(f"The sample layer has no field {field!r} ({parameter}); choose one of its numeric "
                             "fields.")
    if not source.fields().at(index).isNumeric():
        kind = source.fields().at(index).typeName()
        raise FieldcastError(f"Field {field!r} ({parameter}) holds {kind} values, not numbers. Choose a numeric "
                             "field, or make one with the Field calculator (e.g. to_real(\"field\")).")
    return index


def refuse_bad_error_variances(variances: list[float], fids: list[int], field: str) -> None:
    """FieldcastError naming the features (up to five) whose error variance is empty, not a number or negative."""
    bad = [fid for fid, variance in zip(fids, variances) if not (math.isfinite(variance) and variance >= 0)]
    if bad:
        shown = ", ".join(str(fid) for fid in bad[:5]) + (f" and {len(bad) - 5} more" if len(bad) > 5 else "")
        raise FieldcastError(f"{len(bad)} sample(s) have an empty, non-numeric or negative error variance in "
                             f"{field!r} (ERROR_VARIANCE_FIELD; feature id(s) {shown}). Give every sample with a "
                             "value a variance of 0 or more (modelling units squared), or leave "
                             "ERROR_VARIANCE_FIELD empty.")


def read_layer_samples(source: QgsProcessingFeatureSource, field: str, target_crs: QgsCoordinateReferenceSystem,
                       feedback, template: RasterTemplate | None = None, error_field: str = "",
                       below_limit_field: str = "") -> LayerSamples:
    """Read point locations and one numeric attribute from a layer.

    Parameters
    ----------
    source : QgsProcessingFeatureSource
        The point layer (only read).
    field : str
        Name of a numeric attribute, or of a text one holding numbers and entries such as "<0.5" (a limit).
    target_crs : QgsCoordinateReferenceSystem
        Working CRS chosen by the user; an invalid CRS means "choose for me".
    feedback : QgsProcessingFeedback
        Receives the log lines.
    template : RasterTemplate, optional
        A template raster: its CRS is then the working CRS (``target_crs`` must be invalid or the same).
    error_field : str
        Optional numeric attribute of per-sample measurement-error variances (ERROR_VARIANCE_FIELD, modelling
        units squared); every sample with a value must have one of 0 or more.
    below_limit_field : str
        A boolean or 0/1 field true where the value is a reporting limit ("" for none).
    """
    layer_crs = source.sourceCrs()
    if not layer_crs.isValid():
        raise undefined_crs_error(source.sourceName())
    index = source.fields().lookupField(field)
    field_definition = source.fields().at(index) if index >= 0 else None
    numeric = field_definition is not None and field_definition.isNumeric()
    if field_definition is None or numeric or field_definition.type() != QVariant.String:
        index = numeric_field_index(source, field, "FIELD")
    error_index = numeric_field_index(source, error_field, "ERROR_VARIANCE_FIELD") if error_field else None
    if error_field and below_limit_field:
        raise FieldcastError("Values below a limit (BELOW_LIMIT_FIELD) and per-sample error variances "
                             "(ERROR_VARIANCE_FIELD) cannot be combined yet: leave one of the two empty.")
    flag_index = flag_field_index(source, below_limit_field)
    if source.featureCount() == 0:
        raise FieldcastError("The sample layer is empty. Choose a point layer that holds samples.")
    extra = ([] if error_index is None else [error_index]) + ([flag_index] if flag_index >= 0 else [])
    request = QgsFeatureRequest().setSubsetOfAttributes([index] + extra)
    read_fids, read_variances, read_texts, read_flags = [], [], [], []

    def readings():
        for feature in source.getFeatures(request):
            attributes = feature.attributes()
            value, below = _number(attributes[index]), False
            if not numeric:
                parsed, marks = parse_limit_texts([_text(attributes[index])])
                value, below = float(parsed[0]), bool(marks[0])
            read_fids.append(feature.id())
            read_texts.append(below)
            read_flags.append(flag_index >= 0 and _flag(attributes[flag_index]))
            if error_index is not None:
                read_variances.append(_number(attributes[error_index]))
            yield feature_point(feature.geometry(), feature.id()), value

    found = FeatureReadings.sort(readings())
    if found.skipped_values:
        feedback.pushInfo(f"Skipped {found.skipped_values} feature(s) whose {field} is NULL or not a number.")
    if found.skipped_geometry:
        feedback.pushInfo(f"Skipped {found.skipped_geometry} feature(s) without a geometry.")
    if not len(found.values) and not numeric:
        raise FieldcastError(f"Field {field!r} holds text, and none of its entries are numbers or limits such as "
                             "\"<0.5\", so these values are not numbers. Choose a numeric field, or make one with "
                             "the Field calculator (e.g. to_real(\"field\")).")
    if not len(found.values):
        raise FieldcastError(f"The sample layer has no point with a value in {field!r} "
                             f"({found.skipped_values} NULL/NaN values, {found.skipped_geometry} empty geometries). "
                             "Choose a layer with samples, or another field.")
    fids = np.array(read_fids, dtype=np.int64)[found.kept]
    layer_xy = found.xy
    layer_wkt = crs_wkt(layer_crs)
    target_wkt = crs_wkt(target_crs) if target_crs.isValid() else None
    working = choose_working_crs(layer_wkt, layer_xy, target_wkt, source.sourceName(), template)
    feedback.pushInfo(working.reason)
    for warning in working.warnings:
        feedback.pushWarning(warning)
    xy = layer_xy if same_crs(layer_wkt, working.wkt) else transform_points(layer_xy, layer_wkt, working.wkt)
    error_variance = None
    if error_index is not None:
        variances = [read_variances[position] for position in found.kept]
        refuse_bad_error_variances(variances, fids, error_field)
        error_variance = np.array(variances, dtype=float)
    texts = np.array(read_texts, dtype=bool)[found.kept]
    flagged = np.array(read_flags, dtype=bool)[found.kept]
    censored = texts | flagged
    log_censored(feedback, field, below_limit_field, found.values, censored, int(texts.sum()), int(flagged.sum()))
    return LayerSamples(xy, found.values, fids, working, field, found.skipped, error_variance, error_field,
                        censored if censored.any() else None)


def flag_field_index(source: QgsProcessingFeatureSource, name: str) -> int:
    """Index of the BELOW_LIMIT_FIELD ``name`` (-1 for none); FieldcastError for a missing field or one that is
    neither boolean, number nor text."""
    if not name:
        return -1
    index = source.fields().lookupField(name)
    if index < 0:
        raise FieldcastError(f"The sample layer has no field {name!r} for BELOW_LIMIT_FIELD; choose one of its "
                             "fields, or leave it empty.")
    definition = source.fields().at(index)
    if not (definition.isNumeric() or definition.type() in (QVariant.Bool, QVariant.String)):
        raise FieldcastError(f"Field {name!r} (BELOW_LIMIT_FIELD) holds {definition.typeName()} values. Choose a "
                             "boolean or 0/1 field that is true where the value is a reporting limit.")
    return index


def _text(value) -> str | None:
    """A text attribute as Python text, None for NULL."""
    return None if value is None or (hasattr(value, "isNull") and value.isNull()) else str(value)


def _flag(value) -> bool:
    """A BELOW_LIMIT_FIELD attribute as a mark: true, 1 or the text "true"/"1"/"yes"; NULL and anything else is
    not a mark."""
    if isinstance(value, str):
        return value.strip().lower() in ("1", "true", "yes")
    return isinstance(value, (bool, int, float)) and bool(value) and value == value


def log_censored(feedback, field: str, flag_field: str, values: np.ndarray, censored: np.ndarray, texts: int,
                 flagged: int) -> None:
    """Say how many values are limits and where the marks came from; warn when many equal the smallest value."""
    if censored.any():
        parts = [f"{flagged} marked in {flag_field}"] * bool(flagged) + [f"{texts} written as \"<limit\""] * bool(texts)
        feedback.pushInfo(f"{int(censored.sum())} of {len(values)} values of {field} are below a reporting limit "
                          f"({', '.join(parts)}).")
        check_limits(values, censored, field)
    warning = minimum_pile_warning(values, censored, field)
    if warning:
        feedback.pushWarning(warning)


def prepare_samples(samples: LayerSamples, transform: Transform, feedback,
                    nondetects: NonDetects = NonDetects()) -> ModelSamples:
    """Transform values, average coincident points and check the result can be modelled.

    Values below a limit are replaced by the limit times ``nondetects.factor`` (substitution, before the transform)
    or kept as limits, transformed like the values (the likelihood treatment; a group of coincident samples with a
    limit among them is a limit at the mean of its entries, see ``merge_coincident``).

    Raises
    ------
    FieldcastError
        For values the transform cannot take, fewer than three samples or a constant attribute.
    """
    raw, censored = samples.values, samples.censored
    if censored is not None and nondetects.treatment == "substitution":
        raw, censored = substituted(raw, censored, nondetects.factor), None
        feedback.pushInfo(f"Values below a limit replaced by {nondetects.factor:g} times their limit "
                          "(NONDETECTS=substitution).")
    values = transform.forward(raw)
    merged = merge_coincident(samples.xy, values, ids=np.arange(len(values)), error_variance=samples.error_variance,
                              censored=censored)
    if merged.merged_groups:
        weights = ("inverse-variance weighted by their error variances" if samples.error_variance is not None
                   else "in the modelling scale")
        feedback.pushInfo(f"Averaged {merged.merged_points} samples at {merged.merged_groups} shared locations "
                          f"({weights}); {len(merged.values)} samples remain.")
    check_samples(merged.xy, merged.values)
    feedback.pushInfo(f"Using {len(merged.values)} samples of {samples.field}"
                      + (f", with the error variances of {samples.error_field}." if samples.error_field else "."))
    return ModelSamples(merged.xy, merged.values, samples.fids[merged.ids], samples.field, merged.merged_groups,
                        merged.merged_points, error_variance=merged.error_variance, error_field=samples.error_field,
                        censored=merged.censored)
