"""Tests of algorithms.io.geotiff: files read back with GDAL, and no partial output on failure."""
from __future__ import annotations

import json
import os

import numpy as np
import pytest
from osgeo import gdal

from fieldcast.algorithms.errors import FieldcastError, FieldcastUsageError
from fieldcast.algorithms.io import geotiff
from fieldcast.algorithms.io.crs import same_crs, to_wkt2
from fieldcast.algorithms.io.geotiff import NODATA, GeoTiffWriter, gdal_errors, write_geotiff
from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.version import __version__

RD_NEW = to_wkt2("EPSG:28992")
# 300 x 270 cells: crosses the 256-cell tile edges in both directions.
GRID = GridSpec(x_min=178440.0, y_max=333760.0, pixel_size=10.0, n_cols=270, n_rows=300)


def smooth_bands() -> np.ndarray:
    """Two test bands with a few NaN cells (invented values)."""
    rows, cols = np.mgrid[0:GRID.n_rows, 0:GRID.n_cols]
    bands = np.stack([np.sin(rows / 17.0) * 100 + cols, np.cos(cols / 23.0) ** 2]).astype(np.float32)
    bands[0, 5, 7] = np.nan
    bands[1, 299, 269] = np.nan
    return bands


def read_back(path) -> tuple[gdal.Dataset, np.ndarray]:
    dataset = gdal.Open(str(path))
    return dataset, np.stack([dataset.GetRasterBand(i + 1).ReadAsArray() for i in range(dataset.RasterCount)])


def test_written_file_reads_back_with_gdal(tmp_path):
    bands = smooth_bands()
    summary = {"family": "matern", "nu": 1.5}
    path = write_geotiff(tmp_path / "zinc.tif", GRID, bands, RD_NEW, ["prediction", "variance"],
                         {"model_summary": summary, "note": "text"})
    assert path == str(tmp_path / "zinc.tif")
    dataset, values = read_back(path)
    assert same_crs(dataset.GetProjection(), "EPSG:28992")
    assert dataset.GetGeoTransform() == GRID.geotransform
    assert (dataset.RasterXSize, dataset.RasterYSize, dataset.RasterCount) == (270, 300, 2)
    metadata = dataset.GetMetadata()
    assert json.loads(metadata["model_summary"]) == summary
    assert metadata["note"] == "text"
    assert metadata["fieldcast_version"] == __version__
    assert dataset.GetMetadata("IMAGE_STRUCTURE")["COMPRESSION"] == "DEFLATE"
    for index, description in enumerate(["prediction", "variance"]):
        band = dataset.GetRasterBand(index + 1)
        assert band.GetDescription() == description
        assert band.GetNoDataValue() == NODATA
        assert band.DataType == gdal.GDT_Float32
        assert band.GetBlockSize() == [256, 256]
    missing = np.isnan(bands)
    assert np.all(values[missing] == NODATA)
    np.testing.assert_array_equal(values[~missing], bands[~missing])
    assert sorted(os.listdir(tmp_path)) == ["zinc.tif"]


def test_block_written_file_equals_one_piece_file(tmp_path):
    bands = smooth_bands()
    write_geotiff(tmp_path / "whole.tif", GRID, bands, RD_NEW, ["a", "b"], {"k": "v"})
    with GeoTiffWriter(tmp_path / "blocks.tif", GRID, 2, RD_NEW, ["a", "b"], {"k": "v"}) as writer:
        for start in range(0, GRID.n_rows, 70):  # not tile-aligned; flat blocks as from cell_centres
            stop = min(start + 70, GRID.n_rows)
            for index in (1, 0):
                writer.write_block(index, start, bands[index, start:stop].ravel())
        writer.commit()
    whole, whole_values = read_back(tmp_path / "whole.tif")
    blocks, block_values = read_back(tmp_path / "blocks.tif")
    np.testing.assert_array_equal(block_values, whole_values)
    assert blocks.GetMetadata() == whole.GetMetadata()
    assert blocks.GetGeoTransform() == whole.GetGeoTransform()


def test_input_arrays_are_not_modified(tmp_path):
    bands = smooth_bands()
    before = bands.copy()
    write_geotiff(tmp_path / "out.tif", GRID, bands, RD_NEW)
    np.testing.assert_array_equal(bands, before)


def test_exception_mid_write_leaves_nothing(tmp_path):
    bands = smooth_bands()
    with pytest.raises(RuntimeError, match="boom"):
        with GeoTiffWriter(tmp_path / "out.tif", GRID, 2, RD_NEW) as writer:
            writer.write_block(0, 0, bands[0, :100])
            raise RuntimeError("boom")
    assert os.listdir(tmp_path) == []


def test_cancel_without_commit_leaves_nothing_and_keeps_old_file(tmp_path):
    bands = smooth_bands()
    path = write_geotiff(tmp_path / "out.tif", GRID, bands, RD_NEW)
    with GeoTiffWriter(path, GRID, 2, RD_NEW) as writer:
        writer.write_block(0, 0, bands[0, :10] + 1.0)  # then "cancel": leave without commit
    assert os.listdir(tmp_path) == ["out.tif"]
    _, values = read_back(path)
    assert values[0, 0, 0] == bands[0, 0, 0]


def test_incomplete_commit_is_refused_and_discarded(tmp_path):
    bands = smooth_bands()
    with GeoTiffWriter(tmp_path / "out.tif", GRID, 2, RD_NEW) as writer:
        writer.write_block(0, 0, bands[0])
        writer.write_block(1, 0, bands[1, :299])
        with pytest.raises(FieldcastUsageError, match="first band 1 row 299"):
            writer.commit()
    assert os.listdir(tmp_path) == []


def test_failure_when_moving_into_place_leaves_nothing(tmp_path, monkeypatch):
    def refuse(src, dst):
        raise PermissionError("file is locked")

    monkeypatch.setattr(geotiff.os, "replace", refuse)
    with pytest.raises(FieldcastError, match="Could not save .*file is locked"):
        write_geotiff(tmp_path / "out.tif", GRID, smooth_bands(), RD_NEW)
    assert os.listdir(tmp_path) == []


def test_bad_destinations(tmp_path, monkeypatch):
    with pytest.raises(FieldcastError, match="does not exist"):
        GeoTiffWriter(tmp_path / "missing" / "out.tif", GRID, 1, RD_NEW)
    with pytest.raises(FieldcastError, match="not a file name"):
        GeoTiffWriter(tmp_path, GRID, 1, RD_NEW)
    monkeypatch.setattr(geotiff.os, "access", lambda path, mode: False)  # tests run as root
    with pytest.raises(FieldcastError, match="is not writable"):
        GeoTiffWriter(tmp_path / "out.tif", GRID, 1, RD_NEW)
    assert os.listdir(tmp_path) == []


def test_bad_blocks_are_rejected(tmp_path):
    with GeoTiffWriter(tmp_path / "out.tif", GRID, 1, RD_NEW) as writer:
        with pytest.raises(FieldcastUsageError, match="band_index 1"):
            writer.write_block(1, 0, np.zeros((1, 270)))
        with pytest.raises(FieldcastUsageError, match="rows of 270 values"):
            writer.write_block(0, 0, np.zeros((1, 269)))
        with pytest.raises(FieldcastUsageError, match="outside 0..299"):
            writer.write_block(0, 299, np.zeros((2, 270)))
    assert os.listdir(tmp_path) == []


def test_gdal_errors_become_fieldcast_errors_without_changing_global_state():
    before = gdal.GetUseExceptions()
    with pytest.raises(FieldcastError, match="GDAL could not open it: .*No such file"):
        with gdal_errors("open it"):
            gdal.Open("/nonexistent/fieldcast.tif")
    assert gdal.GetUseExceptions() == before


def test_gdal_errors_when_the_host_enabled_gdal_exceptions():
    before = gdal.GetUseExceptions()
    gdal.UseExceptions()
    try:
        with pytest.raises(FieldcastError, match="GDAL could not open it: .*No such file"):
            with gdal_errors("open it"):
                gdal.Open("/nonexistent/fieldcast.tif")
    finally:
        if not before:
            gdal.DontUseExceptions()
