"""Cell masks from polygons: a cell is inside when its centre is inside a polygon.

Expected masks are computed from the polygons' defining inequalities (point-in-half-plane tests),
with edges placed between cell centres so that no centre lies on an edge.
"""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import ogr
from scipy.spatial import ConvexHull, Delaunay, cKDTree

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.io.mask import cell_mask, checked_cell_mask, hull_mask

GRID = GridSpec(x_min=1000.0, y_max=2000.0, pixel_size=10.0, n_cols=30, n_rows=20)


def centres() -> tuple[np.ndarray, np.ndarray]:
    """Cell-centre x and y as (n_rows, n_cols) arrays."""
    xy = GRID.cell_centres()
    return xy[:, 0].reshape(GRID.n_rows, GRID.n_cols), xy[:, 1].reshape(GRID.n_rows, GRID.n_cols)


def test_rectangle_keeps_the_centres_inside_it():
    x, y = centres()
    mask = cell_mask(GRID, ["POLYGON((1052 1901, 1188 1901, 1188 1963, 1052 1963, 1052 1901))"])
    np.testing.assert_array_equal(mask, (x > 1052) & (x < 1188) & (y > 1901) & (y < 1963))


def test_triangle_and_its_wkb_give_the_same_mask():
    x, y = centres()
    wkt = "POLYGON((1001 1801, 1299 1801, 1001 1999, 1001 1801))"
    # Inside: x > 1001, y > 1801 and below the hypotenuse through (1299, 1801) and (1001, 1999).
    expected = (x > 1001) & (y > 1801) & ((x - 1299) * (1999 - 1801) + (y - 1801) * (1299 - 1001) < 0)
    np.testing.assert_array_equal(cell_mask(GRID, [wkt]), expected)
    wkb = bytes(ogr.CreateGeometryFromWkt(wkt).ExportToWkb())
    np.testing.assert_array_equal(cell_mask(GRID, [wkb]), expected)


def test_holes_and_several_polygons():
    x, y = centres()
    shapes = ["POLYGON((1001 1801, 1101 1801, 1101 1901, 1001 1901, 1001 1801),"
              "(1031 1831, 1071 1831, 1071 1871, 1031 1871, 1031 1831))",
              "MULTIPOLYGON(((1201 1901, 1299 1901, 1299 1999, 1201 1999, 1201 1901)))"]
    outer = (x > 1001) & (x < 1101) & (y > 1801) & (y < 1901)
    hole = (x > 1031) & (x < 1071) & (y > 1831) & (y < 1871)
    other = (x > 1201) & (x < 1299) & (y > 1901) & (y < 1999)
    np.testing.assert_array_equal(cell_mask(GRID, shapes), (outer & ~hole) | other)


def test_no_polygons_mask_every_cell():
    assert not cell_mask(GRID, []).any()


@pytest.mark.parametrize("shape, fragment", [
    ("LINESTRING(1000 1000, 1100 1100)", "not a polygon"),
    (b"\x01\x02", "cannot be read"),
    ("POLYGON((", "cannot be read"),
])
def test_unusable_geometries_are_refused(shape, fragment):
    with pytest.raises(FieldcastError, match=fragment):
        cell_mask(GRID, [shape])


def hull_distance(points: np.ndarray, samples: np.ndarray) -> np.ndarray:
    """Distance from each point to the convex hull of ``samples`` (0 inside), from scipy's hull.

    Inside: scipy's Delaunay triangulation finds a simplex. Outside: the distance to the nearest hull edge
    (point-to-segment distance, the projection clipped to the segment).
    """
    hull = ConvexHull(samples)
    inside = Delaunay(samples).find_simplex(points) >= 0
    start, stop = samples[hull.simplices[:, 0]], samples[hull.simplices[:, 1]]
    edge = stop - start
    t = np.clip(np.einsum("mkj,kj->mk", points[:, None, :] - start, edge) / np.sum(edge * edge, axis=1), 0, 1)
    nearest = start + t[..., None] * edge
    distance = np.linalg.norm(points[:, None, :] - nearest, axis=2).min(axis=1)
    return np.where(inside, 0.0, distance)


@pytest.mark.parametrize("margin", [0.0, 25.0, None])
def test_hull_mask_keeps_the_cells_within_the_margin_of_the_convex_hull(meuse, margin):
    grid = GridSpec.from_extent(178000.0, 329000.0, 182000.0, 334200.0, 40.0)  # the Meuse samples with a rim
    mask, used = hull_mask(grid, meuse.xy, margin)
    # Default margin: the median nearest-neighbour distance (scipy cKDTree brute check).
    spacing = np.median(cKDTree(meuse.xy).query(meuse.xy, k=2)[0][:, 1])
    assert used == pytest.approx(spacing if margin is None else margin)
    distance = hull_distance(grid.cell_centres(), np.asarray(meuse.xy)).reshape(mask.shape)
    tolerance = 1e-3 * max(used, 1.0)  # the grown hull's arcs are polygons (ARC_SEGMENTS)
    assert np.all(mask[distance < used - tolerance]) and not np.any(mask[distance > used + tolerance])
    assert 0 < mask.sum() < grid.n_cells


def test_hull_mask_of_samples_on_a_line_needs_a_margin():
    line = np.column_stack([np.linspace(1000.0, 1200.0, 5), np.full(5, 1900.0)])
    with pytest.raises(FieldcastError, match="Give HULL_MARGIN a positive distance, or set MAP_AREA to extent"):
        hull_mask(GRID, line, 0.0)
    mask, _ = hull_mask(GRID, line, 12.0)  # centres lie 5 and 15 m from the line: no centre near the edge
    x, y = centres()
    np.testing.assert_array_equal(mask, np.hypot(np.maximum(np.maximum(1000.0 - x, x - 1200.0), 0.0), y - 1900.0)
                                  < 12.0)


@pytest.mark.parametrize(("shapes", "fragments"), [
    ([], ("The mask layer holds no polygons", "leave MASK empty")),
    (["POLYGON((0 0, 10 0, 10 10, 0 10, 0 0))"],
     ("lies outside the grid: its polygons span 0, 0, 10, 10", "has its real CRS")),
    (["POLYGON((1052 1901, 1053 1901, 1053 1902, 1052 1901))"],
     ("overlaps the grid but holds no cell centre", "smaller PIXEL_SIZE")),
])
def test_masks_without_cells_are_refused_with_the_reason(shapes, fragments):
    with pytest.raises(FieldcastError) as error:
        checked_cell_mask(GRID, shapes)
    for fragment in fragments:
        assert fragment in str(error.value)
    assert not cell_mask(GRID, shapes).any()
