"""Tests of the template raster (algorithms.io.template) and of GridSpec.from_geotransform, against GDAL.

The template grids are built here with GDAL on the Meuse area (EPSG:28992 metres, Rikken & Van Rijn 1993; see
tests/data/README.md), with an origin off the multiples of the 40 m cell size.
"""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import gdal, osr

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.io.crs import same_crs
from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.io.template import RasterTemplate
from fieldcast.algorithms.io.working_crs import choose_working_crs

# Top-left corner 178605 / 333615: 5 m and 15 m off the multiples of 40 m.
MEUSE_TEMPLATE = (178605.0, 40.0, 0.0, 333615.0, 0.0, -40.0)
COLUMNS, ROWS = 70, 98


def write_raster(path, geotransform=MEUSE_TEMPLATE, epsg: int | None = 28992, values=None,
                 data_type=gdal.GDT_Float32, nodata: float | None = None, size=(COLUMNS, ROWS)) -> str:
    """A one-band GeoTIFF with ``geotransform``, the CRS ``epsg`` (None: no CRS) and ``values`` (default 1)."""
    dataset = gdal.GetDriverByName("GTiff").Create(str(path), size[0], size[1], 1, data_type)
    dataset.SetGeoTransform(geotransform)
    if epsg is not None:
        crs = osr.SpatialReference()
        crs.ImportFromEPSG(epsg)
        dataset.SetProjection(crs.ExportToWkt())
    band = dataset.GetRasterBand(1)
    if nodata is not None:
        band.SetNoDataValue(nodata)
    band.WriteArray(np.ones((size[1], size[0])) if values is None else values)
    dataset = None
    return str(path)


def test_from_geotransform_keeps_the_geotransform_exactly():
    grid = GridSpec.from_geotransform(MEUSE_TEMPLATE, COLUMNS, ROWS)
    assert grid.geotransform == MEUSE_TEMPLATE
    assert (grid.n_cols, grid.n_rows) == (COLUMNS, ROWS)
    # Reference: GDAL's ApplyGeoTransform maps (pixel + 0.5, line + 0.5) to the cell centre.
    expected = [gdal.ApplyGeoTransform(MEUSE_TEMPLATE, col + 0.5, row + 0.5)
                for row in range(ROWS) for col in range(COLUMNS)]
    np.testing.assert_allclose(grid.cell_centres(), expected, rtol=0, atol=1e-6)


def test_without_a_template_edges_stay_on_multiples_of_the_pixel_size():
    # The template's extent given as an extent snaps outwards to multiples of 40 m: the corner moves 5 m west
    # and 25 m north and one more column and row appear (the behaviour a template avoids).
    x_min, _, _, y_max, _, _ = MEUSE_TEMPLATE
    snapped = GridSpec.from_extent(x_min, y_max - ROWS * 40.0, x_min + COLUMNS * 40.0, y_max, 40.0)
    assert (snapped.x_min, snapped.y_max) == (178600.0, 333640.0)
    assert (snapped.n_cols, snapped.n_rows) == (COLUMNS + 1, ROWS + 1)


@pytest.mark.parametrize(("geotransform", "words"), [
    ((178605.0, 40.0, 2.0, 333615.0, 1.0, -40.0), "rotated or sheared"),
    ((178605.0, 40.0, 0.0, 329695.0, 0.0, 40.0), "not north-up"),
    ((178605.0, 40.0, 0.0, 333615.0, 0.0, -25.0), "cells of 40 x 25 CRS units"),
])
def test_from_geotransform_refuses_grids_it_cannot_hold(geotransform, words):
    with pytest.raises(FieldcastError, match=words) as caught:
        GridSpec.from_geotransform(geotransform, COLUMNS, ROWS, "The template raster t.tif (TEMPLATE)")
    message = str(caught.value)
    assert message.startswith("The template raster t.tif (TEMPLATE)")
    assert "Warp (reproject)" in message and "EXTENT and PIXEL_SIZE" in message


def test_read_takes_grid_and_crs_of_the_file(tmp_path):
    template = RasterTemplate.read(write_raster(tmp_path / "t.tif"), "t.tif (TEMPLATE)")
    assert template.grid.geotransform == MEUSE_TEMPLATE
    assert (template.grid.n_cols, template.grid.n_rows) == (COLUMNS, ROWS)
    assert same_crs(template.crs_wkt, "EPSG:28992")


def test_read_prefers_the_crs_the_caller_gives(tmp_path):
    path = write_raster(tmp_path / "t.tif", epsg=None)
    with pytest.raises(FieldcastError, match="t.tif"):
        RasterTemplate.read(path, "t.tif (TEMPLATE)")  # no CRS in the file, none given
    template = RasterTemplate.read(path, "t.tif (TEMPLATE)", crs_wkt="EPSG:28992")
    assert same_crs(template.crs_wkt, "EPSG:28992")


def test_read_refuses_a_template_in_degrees_with_advice(tmp_path):
    path = write_raster(tmp_path / "degrees.tif", geotransform=(5.7, 0.0005, 0.0, 51.0, 0.0, -0.0005), epsg=4326)
    with pytest.raises(FieldcastError, match="in degrees") as caught:
        RasterTemplate.read(path, "degrees.tif (TEMPLATE)")
    assert "projected CRS" in str(caught.value) and "Warp (reproject)" in str(caught.value)


def test_read_refuses_what_gdal_cannot_open(tmp_path):
    (tmp_path / "not_a_raster.tif").write_text("no raster here")
    with pytest.raises(FieldcastError, match="GDAL cannot open.*Choose a raster file layer as template \\(TEMPLATE\\)"):
        RasterTemplate.read(str(tmp_path / "not_a_raster.tif"), "not_a_raster.tif (TEMPLATE)")


def test_valid_cells_follow_the_nodata_value(tmp_path):
    values = np.ones((ROWS, COLUMNS))
    values[:10, :20] = -9999.0
    template = RasterTemplate.read(write_raster(tmp_path / "t.tif", values=values, nodata=-9999.0), "t")
    np.testing.assert_array_equal(template.valid_cells(), values != -9999.0)


def test_valid_cells_count_nan_as_nodata_in_a_float_band(tmp_path):
    values = np.ones((ROWS, COLUMNS))
    values[5, 7] = np.nan
    valid = RasterTemplate.read(write_raster(tmp_path / "t.tif", values=values), "t").valid_cells()
    assert valid.sum() == ROWS * COLUMNS - 1 and not valid[5, 7]


def test_valid_cells_are_none_when_every_cell_has_a_value(tmp_path):
    template = RasterTemplate.read(write_raster(tmp_path / "t.tif", data_type=gdal.GDT_Byte), "t")
    assert template.valid_cells() is None


def test_valid_cells_refuse_a_template_that_is_all_nodata(tmp_path):
    values = np.zeros((ROWS, COLUMNS))
    template = RasterTemplate.read(write_raster(tmp_path / "t.tif", values=values, nodata=0.0), "t (TEMPLATE)")
    with pytest.raises(FieldcastError, match="TEMPLATE_NODATA_MASK to false"):
        template.valid_cells()


def test_template_crs_is_the_working_crs(tmp_path, meuse):
    template = RasterTemplate.read(write_raster(tmp_path / "utm.tif", geotransform=(
        685000.0, 40.0, 0.0, 5654000.0, 0.0, -40.0), epsg=32631), "utm.tif (TEMPLATE)")
    working = choose_working_crs("EPSG:28992", meuse.xy, template=template)
    assert same_crs(working.wkt, "EPSG:32631") and working.units == "metre" and working.template
    assert "utm.tif (TEMPLATE)" in working.reason
    same = choose_working_crs("EPSG:28992", meuse.xy, target_wkt="EPSG:32631", template=template)
    assert same_crs(same.wkt, "EPSG:32631")


def test_a_different_target_crs_beside_a_template_is_refused(tmp_path, meuse):
    template = RasterTemplate.read(write_raster(tmp_path / "t.tif"), "t.tif (TEMPLATE)")
    with pytest.raises(FieldcastError, match="TARGET_CRS") as caught:
        choose_working_crs("EPSG:28992", meuse.xy, target_wkt="EPSG:32631", template=template)
    assert "Leave 'Target CRS' empty" in str(caught.value) and "leave TEMPLATE empty" in str(caught.value)
