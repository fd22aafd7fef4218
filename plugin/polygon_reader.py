"""Polygons of a feature source as WKB in the working CRS, for the engine's per-polygon work."""
from __future__ import annotations

from qgis.core import QgsCoordinateReferenceSystem, QgsCoordinateTransform


def working_polygons(source, working_wkt: str, context) -> tuple[list, list[tuple[int, bytes]]]:
    """Every feature of ``source``, and (position, WKB in the working CRS) of those with a geometry."""
    to_working = QgsCoordinateTransform(source.sourceCrs(), QgsCoordinateReferenceSystem.fromWkt(working_wkt),
                                        context.transformContext())
    features, polygons = [], []
    for feature in source.getFeatures():
        features.append(feature)
        geometry = feature.geometry()
        if geometry is None or geometry.isNull() or geometry.isEmpty():
            continue
        geometry.transform(to_working)
        polygons.append((len(features) - 1, bytes(geometry.asWkb())))
    return features, polygons
