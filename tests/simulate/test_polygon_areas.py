"""Areas above a threshold per polygon and realisation, against OGR's own containment of the cell centres."""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import ogr

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.simulate.polygon_areas import polygon_areas_above

UNITS = ["POLYGON ((0 0, 60 0, 60 60, 0 60, 0 0), (20 20, 40 20, 40 40, 20 40, 20 20))",
         "MULTIPOLYGON (((70 70, 100 70, 100 100, 70 100, 70 70)), ((0 80, 10 80, 10 100, 0 100, 0 80)))",
         "POLYGON ((200 200, 210 200, 210 210, 200 200))"]


def test_areas_count_the_cells_whose_centre_ogr_puts_inside():
    grid = GridSpec(0.0, 100.0, 5.0, 20, 20)
    rng = np.random.default_rng(2)
    realisations = rng.normal(size=(7, 20, 20))
    realisations[3, 0, 0] = np.nan  # a cell without value in one realisation is left out everywhere
    mask = np.ones((20, 20), dtype=bool)
    mask[19, :] = False
    polygons = [bytes(ogr.CreateGeometryFromWkt(u).ExportToWkb()) for u in UNITS]
    result = polygon_areas_above(realisations, grid, polygons, 0.5, depths=np.array([2.0, np.nan, 1.0]), mask=mask)
    centres = grid.cell_centres()
    usable = mask.ravel() & np.all(np.isfinite(realisations.reshape(7, -1)), axis=0)
    for index, wkt in enumerate(UNITS[:2]):
        # Reference: GDAL/OGR's (GEOS) point-in-polygon predicate for every cell centre
        geometry = ogr.CreateGeometryFromWkt(wkt)
        members = np.array([geometry.Contains(ogr.CreateGeometryFromWkt(f"POINT ({x} {y})")) for x, y in centres])
        members &= usable
        assert result.cells[index] == np.count_nonzero(members)
        expected = np.count_nonzero(realisations.reshape(7, -1)[:, members] > 0.5, axis=1) * 25.0
        np.testing.assert_array_equal(result.area_above[index], expected)
    np.testing.assert_array_equal(result.volume_above[0], result.area_above[0] * 2.0)
    assert np.all(np.isnan(result.volume_above[1]))
    assert result.cells[2] == 0 and np.all(np.isnan(result.area_above[2]))  # outside the grid


def test_areas_need_a_threshold():
    with pytest.raises(FieldcastError, match="need a THRESHOLD"):
        polygon_areas_above(np.zeros((2, 1, 1)), GridSpec(0.0, 1.0, 1.0, 1, 1), [], float("nan"))
