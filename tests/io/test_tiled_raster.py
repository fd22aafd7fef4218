"""A raster as per-block GeoTIFF tiles plus a VRT: GDAL reads the VRT as the raster written in one GeoTIFF (same
numbers, grid, CRS and nodata), the tiles are referenced relative to it, and nothing appears before the run's
OutputSet commits (nor after it is abandoned)."""
from __future__ import annotations

import os

import numpy as np
import pytest
from osgeo import gdal

from fieldcast.algorithms.errors import FieldcastUsageError
from fieldcast.algorithms.io.geotiff import write_geotiff
from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.io.staging import OutputSet
from fieldcast.algorithms.io.tiled_raster import TiledRaster

GRID = GridSpec(178500.0, 333700.0, 10.0, 30, 600)
BLOCKS = [(0, 256), (256, 512), (512, 600)]


def values() -> np.ndarray:
    """Distinct numbers per cell, nodata (NaN) in one corner."""
    array = np.arange(GRID.n_cells, dtype=float).reshape(GRID.n_rows, GRID.n_cols) / 7.0
    array[:5, :5] = np.nan
    return array


def test_vrt_of_tiles_reads_as_the_single_geotiff(tmp_path):
    array = values()
    write_geotiff(tmp_path / "whole.tif", GRID, [array], "EPSG:28992", ["zinc prediction"])
    path = str(tmp_path / "zinc.vrt")
    with OutputSet() as outputs:
        with TiledRaster(path, GRID, BLOCKS, "EPSG:28992", "zinc prediction", {"fieldcast_support": "point"}) as tiled:
            for start, stop in reversed(BLOCKS):  # in any order
                tiled.write_block(0, start, array[start:stop])
            tiled.commit()
        assert not os.path.exists(path)  # waits for the set
        outputs.commit_all()
    assert sorted(os.listdir(tmp_path)) == ["whole.tif", "zinc.vrt", "zinc_rows0000000.tif", "zinc_rows0000256.tif",
                                            "zinc_rows0000512.tif"]
    assert 'relativeToVRT="1">zinc_rows0000256.tif<' in (tmp_path / "zinc.vrt").read_text()
    vrt, whole = gdal.Open(path), gdal.Open(str(tmp_path / "whole.tif"))
    assert np.array_equal(vrt.ReadAsArray(), whole.ReadAsArray())
    assert vrt.GetGeoTransform() == whole.GetGeoTransform() and vrt.GetProjection() == whole.GetProjection()
    band = vrt.GetRasterBand(1)
    assert band.GetNoDataValue() == whole.GetRasterBand(1).GetNoDataValue()
    assert band.GetDescription() == "zinc prediction" and vrt.GetMetadataItem("fieldcast_support") == "point"


def test_abandoned_run_and_missing_tiles_leave_no_file(tmp_path):
    path = str(tmp_path / "zinc.vrt")
    with pytest.raises(FieldcastUsageError, match="1 tiles of .* were never written, first from row 512"):
        with OutputSet():
            with TiledRaster(path, GRID, BLOCKS, "EPSG:28992", "zinc prediction") as tiled:
                tiled.write_block(0, 0, values()[:256])
                tiled.write_block(0, 256, values()[256:512])
                tiled.commit()
    assert os.listdir(tmp_path) == []
