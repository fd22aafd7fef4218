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

from ..algorithms import (
    FeatureReadings,
    FieldcastError,
    RasterTemplate,
    Samples,
    Transform,
    WorkingCrs,
    check_samples,
    choose_working_crs,
    merge_coincident,
    same_crs,
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
    """

    xy: np.ndarray
    values: np.ndarray
    fids: np.ndarray
    working: WorkingCrs
    field: str
    skipped: dict[str, int]
    error_variance: np.ndarray | None = None
    error_field: str = ""


@dataclass(frozen=True)
class ModelSamples:
    """Samples ready for the engine: transformed values, coincident points merged.

    ``xy`` is in the working CRS, ``values`` in the modelling scale; ``fids``
    belong to the first feature of each merged group; ``field`` names the attribute. ``merged_points``
    samples were averaged into ``merged_groups`` shared locations. ``covariates`` are the mean's covariate
    columns at the samples (None without covariates); ``error_variance`` each sample's measurement-error
    variance (merged samples: the combined one) from the field ``error_field``, None without one.
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

    def with_covariates(self, columns: np.ndarray, kept: np.ndarray) -> ModelSamples:
        """The samples ``kept`` (where every covariate has a value) with their covariate columns, checked again."""
        check_samples(self.xy[kept], self.values[kept])
        return ModelSamples(self.xy[kept], self.values[kept], self.fids[kept], self.field, self.merged_groups,
                            self.merged_points, columns,
                            None if self.error_variance is None else self.error_variance[kept], self.error_field)

    def engine_samples(self) -> Samples:
        """The samples as the engine's :class:`Samples` (ids are the feature ids), e.g. for the fit report."""
        return Samples(self.xy, self.values, self.fids, self.merged_groups, self.merged_points, self.error_variance)


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
                       feedback, template: RasterTemplate | None = None, error_field: str = "") -> LayerSamples:
    """Read point locations and one numeric attribute from a layer.

    Parameters
    ----------
    source : QgsProcessingFeatureSource
        The point layer (only read).
    field : str
        Name of a numeric attribute.
    target_crs : QgsCoordinateReferenceSystem
        Working CRS chosen by the user; an invalid CRS means "choose for me".
    feedback : QgsProcessingFeedback
        Receives the log lines.
    template : RasterTemplate, optional
        A template raster: its CRS is then the working CRS (``target_crs`` must be invalid or the same).
    error_field : str
        Optional numeric attribute of per-sample measurement-error variances (ERROR_VARIANCE_FIELD, modelling
        units squared); every sample with a value must have one of 0 or more.
    """
    layer_crs = source.sourceCrs()
    if not layer_crs.isValid():
        raise undefined_crs_error(source.sourceName())
    index = numeric_field_index(source, field, "FIELD")
    error_index = numeric_field_index(source, error_field, "ERROR_VARIANCE_FIELD") if error_field else None
    if source.featureCount() == 0:
        raise FieldcastError("The sample layer is empty. Choose a point layer that holds samples.")
    request = QgsFeatureRequest().setSubsetOfAttributes([index] if error_index is None else [index, error_index])
    read_fids, read_variances = [], []

    def readings():
        for feature in source.getFeatures(request):
            read_fids.append(feature.id())
            if error_index is not None:
                read_variances.append(_number(feature.attributes()[error_index]))
            yield feature_point(feature.geometry(), feature.id()), _number(feature.attributes()[index])

    found = FeatureReadings.sort(readings())
    if found.skipped_values:
        feedback.pushInfo(f"Skipped {found.skipped_values} feature(s) whose {field} is NULL or not a number.")
    if found.skipped_geometry:
        feedback.pushInfo(f"Skipped {found.skipped_geometry} feature(s) without a geometry.")
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
    return LayerSamples(xy, found.values, fids, working, field, found.skipped, error_variance, error_field)


def prepare_samples(samples: LayerSamples, transform: Transform, feedback) -> ModelSamples:
    """Transform values, average coincident points and check the result can be modelled.

    Raises
    ------
    FieldcastError
        For values the transform cannot take, fewer than three samples or a constant attribute.
    """
    values = transform.forward(samples.values)
    merged = merge_coincident(samples.xy, values, ids=np.arange(len(values)), error_variance=samples.error_variance)
    if merged.merged_groups:
        weights = ("inverse-variance weighted by their error variances" if samples.error_variance is not None
                   else "in the modelling scale")
        feedback.pushInfo(f"Averaged {merged.merged_points} samples at {merged.merged_groups} shared locations "
                          f"({weights}); {len(merged.values)} samples remain.")
    check_samples(merged.xy, merged.values)
    feedback.pushInfo(f"Using {len(merged.values)} samples of {samples.field}"
                      + (f", with the error variances of {samples.error_field}." if samples.error_field else "."))
    return ModelSamples(merged.xy, merged.values, samples.fids[merged.ids], samples.field, merged.merged_groups,
                        merged.merged_points, error_variance=merged.error_variance, error_field=samples.error_field)
