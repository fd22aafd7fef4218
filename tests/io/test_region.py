"""Region: the union of polygons where new samples may go, and its lattice of points (invented shapes: plain
rectangles and an L, whose areas are exact)."""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import ogr

from fieldcast.algorithms import FieldcastError, Region

RECTANGLE = "POLYGON((0 0,100 0,100 50,0 50,0 0))"
L_SHAPE = "POLYGON((0 0,60 0,60 20,20 20,20 60,0 60,0 0))"


def wkb(text: str) -> bytes:
    return ogr.CreateGeometryFromWkt(text).ExportToWkb()


def test_lattice_of_a_rectangle_tiles_its_area():
    region = Region.from_shapes([wkb(RECTANGLE)])
    xy, spacing = region.lattice(200)
    assert region.area == pytest.approx(5000.0)
    assert spacing == pytest.approx(5.0) and len(xy) == 200
    assert np.all(region.contains(xy))


def test_lattice_of_an_l_keeps_only_points_inside():
    region = Region.from_shapes([wkb(L_SHAPE)])
    xy, spacing = region.lattice(400)
    assert region.area == pytest.approx(2000.0)
    assert not np.any((xy[:, 0] > 20) & (xy[:, 1] > 20))
    # Cell centres inside: the lattice covers the area up to its edge cells (rel=0.1 is our tolerance).
    assert len(xy) * spacing ** 2 == pytest.approx(2000.0, rel=0.1)


def test_overlapping_polygons_count_their_area_once():
    region = Region.from_shapes([wkb(RECTANGLE), wkb("POLYGON((50 0,150 0,150 50,50 50,50 0))")])
    assert region.area == pytest.approx(7500.0)
    assert list(region.contains(np.array([[120.0, 10.0], [160.0, 10.0]]))) == [True, False]


@pytest.mark.parametrize("shapes", [[], [wkb("POLYGON((0 0,100 0,50 0,0 0))")], [wkb("POINT(1 1)")]])
def test_regions_without_area_are_refused_with_advice(shapes):
    with pytest.raises(FieldcastError, match="REGION.*(polygon layer|no polygons)"):
        Region.from_shapes(shapes)
