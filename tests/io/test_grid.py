"""Tests of algorithms.io.grid: geometry against GDAL's geotransform convention and the Meuse grid."""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import gdal
from sklearn.neighbors import NearestNeighbors

from fieldcast.algorithms.errors import FieldcastError, FieldcastUsageError
from fieldcast.algorithms.io.grid import (
    GridSpec,
    check_extent_reach,
    default_pixel_size,
    output_grid,
    readable_ceil,
    readable_floor,
)


def meuse_grid_spec(meuse_grid) -> GridSpec:
    # Dataset documentation (data/meuse.grid.rda): cell centres at 40 m x 40 m spacing.
    x_min, y_min = meuse_grid.xy.min(axis=0) - 20.0
    x_max, y_max = meuse_grid.xy.max(axis=0) + 20.0
    return GridSpec.from_extent(x_min, y_min, x_max, y_max, 40.0, align_to=(x_min, y_min))


def test_meuse_grid_cells_are_cell_centres(meuse_grid):
    grid = meuse_grid_spec(meuse_grid)
    assert (grid.n_cols, grid.n_rows) == (78, 104)  # (181540 - 178460) / 40 + 1, (333740 - 329620) / 40 + 1
    centres = {tuple(p) for p in grid.cell_centres()}
    assert {tuple(p) for p in meuse_grid.xy} <= centres
    assert grid.extent == (178440.0, 329600.0, 181560.0, 333760.0)


def test_cell_centres_follow_gdal_geotransform():
    # Reference: GDAL's ApplyGeoTransform maps (pixel + 0.5, line + 0.5) to the cell centre.
    grid = GridSpec(x_min=1000.0, y_max=5000.0, pixel_size=25.0, n_cols=4, n_rows=3)
    expected = [gdal.ApplyGeoTransform(grid.geotransform, col + 0.5, row + 0.5)
                for row in range(3) for col in range(4)]
    np.testing.assert_allclose(grid.cell_centres(), expected)
    assert grid.geotransform == (1000.0, 25.0, 0.0, 5000.0, 0.0, -25.0)
    assert grid.extent == (1000.0, 4925.0, 1100.0, 5000.0)


def test_cell_centre_blocks_concatenate_to_the_whole_grid():
    grid = GridSpec(x_min=0.0, y_max=10.0, pixel_size=1.0, n_cols=5, n_rows=7)
    blocks = [grid.cell_centres(start, min(start + 3, 7)) for start in range(0, 7, 3)]
    np.testing.assert_array_equal(np.vstack(blocks), grid.cell_centres())
    assert grid.cell_centres(2, 2).shape == (0, 2)
    with pytest.raises(FieldcastUsageError):
        grid.cell_centres(5, 8)


def test_from_extent_snaps_outwards():
    # Sample extent of Meuse (EPSG:28992), by hand: 178605 -> 178600, 181390 -> 181400,
    # 329714 -> 329700, 333611 -> 333650 at 50 m.
    grid = GridSpec.from_extent(178605.0, 329714.0, 181390.0, 333611.0, 50.0)
    assert grid.extent == (178600.0, 329700.0, 181400.0, 333650.0)
    assert (grid.n_cols, grid.n_rows) == (56, 79)
    aligned = GridSpec.from_extent(178605.0, 329714.0, 181390.0, 333611.0, 50.0, align_to=(10.0, 20.0))
    assert aligned.extent == (178560.0, 329670.0, 181410.0, 333620.0)


def test_from_extent_ignores_float_noise():
    grid = GridSpec.from_extent(0.0, 0.0, 0.3, 0.3, 0.1)  # 0.3 / 0.1 == 2.9999999999999996
    assert (grid.n_cols, grid.n_rows) == (3, 3)


@pytest.mark.parametrize("pixel", [0.0, -5.0, float("nan"), float("inf")])
def test_from_extent_rejects_bad_pixel_size(pixel):
    with pytest.raises(FieldcastError, match="Enter a pixel size larger than zero"):
        GridSpec.from_extent(0.0, 0.0, 100.0, 100.0, pixel)


def test_from_extent_rejects_zero_area():
    with pytest.raises(FieldcastError, match="zero or negative width"):
        GridSpec.from_extent(0.0, 0.0, 0.0, 100.0, 1.0)
    with pytest.raises(FieldcastError, match="zero or negative width"):
        GridSpec.from_extent(0.0, 100.0, 10.0, 50.0, 1.0)
    with pytest.raises(FieldcastError, match="at least one whole column"):
        GridSpec(x_min=0.0, y_max=0.0, pixel_size=1.0, n_cols=0, n_rows=3)


def test_readable_numbers():
    assert readable_floor(53.7) == 50.0
    assert readable_floor(0.037) == pytest.approx(0.025)
    assert readable_floor(20.0) == 20.0
    assert readable_ceil(53.7) == 100.0
    assert readable_ceil(2.1) == 2.5
    assert readable_ceil(40.0) == 50.0
    assert readable_ceil(50.0) == 50.0


def test_default_pixel_size_from_meuse_spacing(meuse):
    # Reference for the spacing: scikit-learn's exact nearest-neighbour search.
    distances, _ = NearestNeighbors(n_neighbors=2).fit(meuse.xy).kneighbors(meuse.xy)
    spacing = float(np.median(distances[:, 1]))
    extent = (178605.0, 329714.0, 181390.0, 333611.0)
    pixel = default_pixel_size(meuse.xy, extent)
    assert pixel == readable_floor(spacing / 2.0)
    assert pixel == 50.0  # median spacing about 107 m


def test_default_pixel_size_respects_max_cells(meuse):
    extent = (178605.0, 329714.0, 181390.0, 333611.0)
    pixel = default_pixel_size(meuse.xy, extent, max_cells=1000)
    assert GridSpec.from_extent(*extent, pixel).n_cells <= 1000
    finer = readable_floor(pixel * (1 - 1e-6))
    assert GridSpec.from_extent(*extent, finer).n_cells > 1000  # the next finer readable size does not fit


def test_default_pixel_size_needs_two_locations():
    with pytest.raises(FieldcastError, match="Enter a pixel size explicitly"):
        default_pixel_size(np.array([[1.0, 2.0], [1.0, 2.0]]), (0.0, 0.0, 10.0, 10.0))


def test_memory_estimate_and_check():
    grid = GridSpec(x_min=0.0, y_max=0.0, pixel_size=10.0, n_cols=1000, n_rows=500)
    assert grid.estimated_bytes(3) == 1000 * 500 * 3 * 4
    assert grid.estimated_bytes(1, dtype_bytes=8) == 1000 * 500 * 8
    grid.check_memory(6_000_000, n_bands=3)
    with pytest.raises(FieldcastError, match=r"1,000 x 500 cells .* 6\.0 MB, more than the 1\.0 MB") as info:
        grid.check_memory(1_000_000, n_bands=3)
    assert "at least 25 instead of 10" in str(info.value)
    coarser = GridSpec.from_extent(*grid.extent, 25.0)
    coarser.check_memory(1_000_000, n_bands=3)


def test_overlaps(meuse, meuse_grid):
    grid = meuse_grid_spec(meuse_grid)
    assert grid.overlaps(meuse.xy)
    assert not grid.overlaps(meuse.xy + 10_000.0)
    assert not grid.overlaps(np.empty((0, 2)))
    far_apart = np.array([[grid.extent[0] - 100.0, 0.0], [grid.extent[2] + 100.0, 1e6]])
    assert grid.overlaps(far_apart)  # bounding box spans the grid


def test_extent_reach_refuses_more_than_ten_sample_diagonals():
    # A 3-4-5 right triangle of samples: the bounding-box diagonal is 5 units (Pythagoras).
    xy = np.array([[0.0, 0.0], [3.0, 0.0], [0.0, 4.0]])
    check_extent_reach((-10.0, -10.0, 20.0, 30.0), xy, "metre")  # diagonal 50 = 10 x 5
    with pytest.raises(FieldcastError) as error:
        check_extent_reach((-10.0, -10.0, 20.1, 30.0), xy, "metre")
    for fragment in ("50.0601 metres across", "10 times the samples'", "up to 50 metres", "leave EXTENT empty"):
        assert fragment in str(error.value)


def test_output_grid_defaults_to_the_samples_bounding_box_and_their_spacing(meuse):
    # Meuse samples: bounding box from numpy directly; 50 m from half the median spacing of about 107 m (above).
    grid = output_grid(meuse.xy)
    low, high = meuse.xy.min(axis=0), meuse.xy.max(axis=0)
    assert grid.pixel_size == 50.0
    assert grid.x_min <= low[0] and grid.extent[1] <= low[1] and grid.extent[2] >= high[0] and grid.y_max >= high[1]
    assert grid.extent[2] - grid.x_min < high[0] - low[0] + 2 * 50.0  # no more than a cell beyond each side
    chosen = output_grid(meuse.xy, (179000.0, 330000.0, 180000.0, 331000.0), 100.0)
    assert (chosen.n_cols, chosen.n_rows, chosen.pixel_size) == (10, 10, 100.0)


def test_output_grid_refuses_an_extent_away_from_or_far_wider_than_the_samples(meuse):
    with pytest.raises(FieldcastError, match="does not overlap the samples.*leave it empty"):
        output_grid(meuse.xy, (0.0, 0.0, 1000.0, 1000.0), 100.0, "metre")
    with pytest.raises(FieldcastError, match="leave EXTENT empty"):
        output_grid(meuse.xy, (100000.0, 250000.0, 260000.0, 410000.0), 1000.0, "metre")
