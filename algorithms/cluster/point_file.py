"""Point samples read from a vector file with OGR, for runs outside QGIS (:mod:`.cli`).

What QGIS's sample reader does for a toolbox run, done with GDAL's OGR on a file: one numeric field of one
point layer, features without a value or geometry skipped and counted, true multipoints refused, and the
points reprojected to the model's CRS (pyproj). The file is only read.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from osgeo import ogr

from ..errors import FieldcastError
from ..io.crs import is_undefined, parse_crs, same_crs, transform_points
from ..io.samples import FeatureReadings

NUMERIC_FIELD_TYPES = (ogr.OFTInteger, ogr.OFTInteger64, ogr.OFTReal)


@dataclass(frozen=True)
class PointSamples:
    """Samples with a value as read from a point file.

    Attributes
    ----------
    xy : ndarray of shape (n, 2)
        Locations in the CRS asked for (the model's), easting and northing.
    values : ndarray of shape (n,)
        The field's values, attribute units.
    skipped : dict of str to int
        Features left out, by reason (only reasons that occurred).
    """

    xy: np.ndarray
    values: np.ndarray
    skipped: dict[str, int]


def open_layer(path: str, layer: str = "") -> tuple[ogr.DataSource, ogr.Layer]:
    """The vector file at ``path`` and its layer ``layer`` (empty: its only layer).

    Raises
    ------
    FieldcastError
        If OGR cannot open the file, it has no such layer, or it has several and none is named.
    """
    source = ogr.Open(path, 0)
    if source is None:
        raise FieldcastError(f"Cannot open {path} as a vector file (--samples). Give a GeoPackage, shapefile or "
                             "other point file that GDAL reads.")
    names = [source.GetLayer(index).GetName() for index in range(source.GetLayerCount())]
    if layer and layer not in names:
        raise FieldcastError(f"{path} has no layer {layer!r} (--layer); its layers are {', '.join(names)}.")
    if not layer and len(names) != 1:
        raise FieldcastError(f"{path} holds {len(names)} layers ({', '.join(names) or 'none'}); name the sample "
                             "layer with --layer.")
    return source, source.GetLayerByName(layer or names[0])


def feature_point(geometry, fid: int) -> tuple[float, float] | None:
    """The point of a feature, None without geometry; FieldcastError for several parts or another kind."""
    if geometry is None or geometry.IsEmpty():
        return None
    kind = ogr.GT_Flatten(geometry.GetGeometryType())
    if kind == ogr.wkbMultiPoint:
        if geometry.GetGeometryCount() != 1:
            raise FieldcastError(f"Feature {fid} of the sample layer is a multipoint with "
                                 f"{geometry.GetGeometryCount()} points. Split multipoints into single points "
                                 "first (e.g. ogr2ogr -explodecollections), so each point is its own feature.")
        geometry = geometry.GetGeometryRef(0)
    elif kind != ogr.wkbPoint:
        raise FieldcastError(f"Feature {fid} of the sample layer is a {geometry.GetGeometryName().lower()}, not a "
                             "point. Give a point layer with --samples (and --layer).")
    return geometry.GetX(), geometry.GetY()


def read_point_file(path: str, field: str, crs_wkt: str, layer: str = "") -> PointSamples:
    """Read point locations and the numeric attribute ``field`` of a vector file, in the CRS ``crs_wkt``.

    Raises
    ------
    FieldcastError
        For a file or layer that cannot be read, a missing or non-numeric field, a layer without CRS, no
        point with a value, or a feature that is no point.
    """
    source, table = open_layer(path, layer)
    definition = table.GetLayerDefn()
    index = definition.GetFieldIndex(field)
    if index < 0:
        fields = [definition.GetFieldDefn(i).GetName() for i in range(definition.GetFieldCount())]
        raise FieldcastError(f"The sample layer {table.GetName()} has no field {field!r} (--field); its fields are "
                             f"{', '.join(fields) or 'none'}.")
    if definition.GetFieldDefn(index).GetType() not in NUMERIC_FIELD_TYPES:
        raise FieldcastError(f"Field {field!r} of {table.GetName()} holds "
                             f"{definition.GetFieldDefn(index).GetTypeName()} values, not numbers. Choose a numeric "
                             "field with --field.")
    reference = table.GetSpatialRef()
    if reference is None or is_undefined(parse_crs(reference.ExportToWkt())):
        raise FieldcastError(f"The sample layer {table.GetName()} has no defined CRS, so its coordinates cannot be "
                             "put in the model's CRS. Assign its real CRS first (e.g. ogr2ogr -a_srs EPSG:code).")
    found = FeatureReadings.sort(
        (feature_point(feature.GetGeometryRef(), feature.GetFID()),
         feature.GetFieldAsDouble(index) if feature.IsFieldSetAndNotNull(index) else math.nan) for feature in table)
    layer_wkt = reference.ExportToWkt()
    del table, source
    if not len(found.values):
        raise FieldcastError(f"The sample layer has no point with a value in {field!r} ({found.skipped_values} "
                             f"NULL/NaN values, {found.skipped_geometry} empty geometries). Give a layer with "
                             "samples, or another --field.")
    xy = found.xy
    if not same_crs(layer_wkt, crs_wkt):
        xy = transform_points(xy, layer_wkt, crs_wkt)
    return PointSamples(xy, found.values, found.skipped)
