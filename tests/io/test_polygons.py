"""Polygon discretisation: regular points inside, holes left out, every part covered, tiny units flagged."""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import ogr

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.io.polygons import TARGET_POINTS, discretise_polygon


def wkb(wkt: str) -> bytes:
    return bytes(ogr.CreateGeometryFromWkt(wkt).ExportToWkb())


def ogr_contains(wkt: str, points: np.ndarray) -> np.ndarray:
    # Reference: GDAL/OGR's own (GEOS) point-in-polygon predicate, independent of the engine's even-odd test.
    geometry = ogr.CreateGeometryFromWkt(wkt)
    return np.array([geometry.Contains(ogr.CreateGeometryFromWkt(f"POINT ({x} {y})")) for x, y in points])


def test_square_gets_the_adaptive_lattice_of_cell_centres():
    unit = discretise_polygon(wkb("POLYGON ((0 0, 400 0, 400 400, 0 400, 0 0))"))
    assert unit.spacing == pytest.approx(400.0 / np.sqrt(TARGET_POINTS))
    assert len(unit.points) == TARGET_POINTS and not unit.centroid_only
    assert unit.area == pytest.approx(160000.0)
    assert np.mean(unit.points, axis=0) == pytest.approx([200.0, 200.0])


def test_holes_and_parts_follow_ogr_containment():
    wkt = ("MULTIPOLYGON (((0 0, 300 0, 300 300, 0 300, 0 0), (100 100, 200 100, 200 200, 100 200, 100 100)),"
           " ((500 0, 560 10, 540 90, 500 0)))")
    unit = discretise_polygon(wkb(wkt), spacing=7.0)
    assert np.all(ogr_contains(wkt, unit.points))
    lattice_in_hole = (np.abs(unit.points - 150.0) < 50.0).all(axis=1)
    assert not lattice_in_hole.any()
    assert np.any(unit.points[:, 0] > 500.0)  # the triangle is covered too
    # every point of the 7 m lattice over the envelope that OGR puts inside is kept
    xs = 0.0 + (np.arange(int(np.ceil(560 / 7.0))) + 0.5) * 7.0
    ys = 0.0 + (np.arange(int(np.ceil(300 / 7.0))) + 0.5) * 7.0
    lattice = np.column_stack([c.ravel() for c in np.meshgrid(xs, ys)])
    assert len(unit.points) == int(np.count_nonzero(ogr_contains(wkt, lattice)))


def test_a_sliver_with_no_lattice_point_gets_its_centroid_and_a_flag():
    unit = discretise_polygon(wkb("POLYGON ((0 0, 100 0, 100 0.01, 0 0.01, 0 0))"), spacing=5.0)
    assert unit.centroid_only and unit.points.shape == (1, 2)
    assert unit.points[0] == pytest.approx([50.0, 0.005])


def test_a_line_is_refused_with_what_to_choose():
    with pytest.raises(FieldcastError, match="not a polygon; choose a polygon layer for AREAS"):
        discretise_polygon(wkb("LINESTRING (0 0, 1 1)"), what="Feature 3 of AREAS")
