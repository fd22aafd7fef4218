"""Tests of algorithms.io.staging: a set of outputs appears together on commit, or not at all."""
from __future__ import annotations

import os
import re

import numpy as np
import pytest
from osgeo import gdal

from fault_injection import fail_on_call, names
from fieldcast.algorithms import OutputSet
from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.io import staging
from fieldcast.algorithms.io.atomic import write_text_atomically
from fieldcast.algorithms.io.crs import to_wkt2
from fieldcast.algorithms.io.geotiff import GeoTiffWriter, write_geotiff
from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.grid_surfaces import FieldRasters, SurfaceScale, write_surfaces

RD_NEW = to_wkt2("EPSG:28992")
GRID = GridSpec(x_min=178440.0, y_max=333760.0, pixel_size=10.0, n_cols=30, n_rows=20)
BAND = np.arange(GRID.n_rows * GRID.n_cols, dtype=float).reshape(GRID.n_rows, GRID.n_cols)




def test_temporary_name_sits_beside_the_destination(tmp_path):
    temporary = staging.temporary_path(tmp_path / "zinc.tif")
    assert re.fullmatch(rf"\.zinc\.tif\.fieldcast-{os.getpid()}-[0-9a-f]{{12}}\.part", temporary.rsplit("/", 1)[1])
    assert temporary.startswith(str(tmp_path))
    assert staging.temporary_path(tmp_path / "zinc.tif") != temporary


def test_files_appear_only_on_commit_all(tmp_path):
    with OutputSet() as outputs:
        write_geotiff(tmp_path / "zinc.tif", GRID, [BAND], RD_NEW)
        write_text_atomically(tmp_path / "zinc.json", "{}", "the model file")
        assert all(name.endswith(".part") for name in names(tmp_path)) and len(names(tmp_path)) == 2
        placed = outputs.commit_all()
    assert sorted(placed) == [str(tmp_path / "zinc.json"), str(tmp_path / "zinc.tif")]
    assert names(tmp_path) == ["zinc.json", "zinc.tif"]
    np.testing.assert_array_equal(gdal.Open(str(tmp_path / "zinc.tif")).ReadAsArray(), BAND)
    assert (tmp_path / "zinc.json").read_text() == "{}"


def test_an_error_before_commit_removes_every_temporary_and_keeps_earlier_files(tmp_path):
    (tmp_path / "zinc.json").write_text("earlier")
    with pytest.raises(RuntimeError, match="later step"), OutputSet():
        write_geotiff(tmp_path / "zinc.tif", GRID, [BAND], RD_NEW)
        write_text_atomically(tmp_path / "zinc.json", "{}", "the model file")
        raise RuntimeError("later step")
    assert names(tmp_path) == ["zinc.json"]
    assert (tmp_path / "zinc.json").read_text() == "earlier"


def test_leaving_without_commit_discards(tmp_path):
    with OutputSet():
        write_text_atomically(tmp_path / "report.html", "<html></html>", "the report")
    assert names(tmp_path) == []


def test_a_failed_move_at_commit_removes_the_files_already_moved(tmp_path, monkeypatch):
    fail_on_call(monkeypatch, staging.StagedFile, "move_into_place", 2)
    with pytest.raises(FieldcastError, match="No space left"), OutputSet() as outputs:
        write_geotiff(tmp_path / "prediction.tif", GRID, [BAND], RD_NEW)
        write_geotiff(tmp_path / "variance.tif", GRID, [BAND], RD_NEW)
        write_geotiff(tmp_path / "exceedance.tif", GRID, [BAND], RD_NEW)
        outputs.commit_all()
    assert names(tmp_path) == []


def test_a_move_that_the_system_refuses_names_the_destination(tmp_path):
    (tmp_path / "zinc.tif").mkdir()  # a folder where the raster should go
    with pytest.raises(FieldcastError, match=r"Could not save .*zinc\.tif"), OutputSet() as outputs:
        write_text_atomically(tmp_path / "zinc.json", "{}", "the model file")
        write_text_atomically(tmp_path / "zinc.tif", "not a raster", "the raster")
        outputs.commit_all()
    assert names(tmp_path) == ["zinc.tif"] and not any((tmp_path / "zinc.tif").iterdir())


def test_outside_a_set_each_file_is_placed_at_once(tmp_path):
    write_text_atomically(tmp_path / "zinc.json", "{}", "the model file")
    assert names(tmp_path) == ["zinc.json"]


def surfaces(folder, fields: int) -> list[FieldRasters]:
    return [FieldRasters(f"f{index}", {"prediction": str(folder / f"f{index}_prediction.tif"),
                                       "variance": str(folder / f"f{index}_variance.tif")}, {})
            for index in range(fields)]


def constant_predictor(centres, progress, should_stop):
    """Mean 1 and variance 2 at every cell, for two fields."""
    return np.ones((len(centres), 2)), np.full(len(centres), 2.0)


def test_write_surfaces_places_every_field_together(tmp_path):
    write_surfaces(constant_predictor, GRID, None, SurfaceScale(Transform()), RD_NEW, surfaces(tmp_path, 2))
    assert names(tmp_path) == ["f0_prediction.tif", "f0_variance.tif", "f1_prediction.tif", "f1_variance.tif"]
    np.testing.assert_array_equal(gdal.Open(str(tmp_path / "f1_variance.tif")).ReadAsArray(), 2.0)


def test_write_surfaces_leaves_nothing_when_a_later_field_fails(tmp_path, monkeypatch):
    fail_on_call(monkeypatch, GeoTiffWriter, "commit", 3)  # the first raster of the second field
    with pytest.raises(FieldcastError, match="No space left"):
        write_surfaces(constant_predictor, GRID, None, SurfaceScale(Transform()), RD_NEW, surfaces(tmp_path, 2))
    assert names(tmp_path) == []


def test_write_surfaces_inside_a_set_waits_for_its_commit(tmp_path):
    with OutputSet():
        write_surfaces(constant_predictor, GRID, None, SurfaceScale(Transform()), RD_NEW, surfaces(tmp_path, 2))
        assert len(names(tmp_path)) == 4 and all(name.endswith(".part") for name in names(tmp_path))
    assert names(tmp_path) == []


def test_a_failed_second_move_puts_back_the_earlier_file_the_first_move_replaced(tmp_path, monkeypatch):
    (tmp_path / "zinc.json").write_text("earlier model")
    (tmp_path / "zinc.html").write_text("earlier report")
    fail_on_call(monkeypatch, staging.StagedFile, "move_into_place", 2)
    with pytest.raises(FieldcastError, match="No space left"), OutputSet() as outputs:
        write_text_atomically(tmp_path / "zinc.json", "{}", "the model file")
        write_text_atomically(tmp_path / "zinc.html", "<html></html>", "the report")
        outputs.commit_all()
    assert names(tmp_path) == ["zinc.html", "zinc.json"]
    assert (tmp_path / "zinc.json").read_text() == "earlier model"
    assert (tmp_path / "zinc.html").read_text() == "earlier report"


def test_a_commit_leaves_no_backup_behind(tmp_path):
    (tmp_path / "zinc.json").write_text("earlier model")
    with OutputSet() as outputs:
        write_text_atomically(tmp_path / "zinc.json", "{}", "the model file")
        outputs.commit_all()
    assert names(tmp_path) == ["zinc.json"] and (tmp_path / "zinc.json").read_text() == "{}"


def test_a_read_only_destination_is_refused_and_kept(tmp_path):
    earlier = tmp_path / "zinc.json"
    earlier.write_text("kept on purpose")
    earlier.chmod(0o444)
    with pytest.raises(FieldcastError, match=rf"{earlier} exists and is read-only.*Make the file writable"), \
            OutputSet() as outputs:
        write_text_atomically(earlier, "{}", "the model file")
        outputs.commit_all()
    assert names(tmp_path) == ["zinc.json"] and earlier.read_text() == "kept on purpose"
    assert earlier.stat().st_mode & 0o777 == 0o444


def test_a_protected_file_is_restored_when_the_run_fails(tmp_path):
    table = tmp_path / "table.csv"
    table.write_text("earlier table\n")
    with pytest.raises(RuntimeError, match="sink failed"), OutputSet() as outputs:
        outputs.protect(str(table))
        table.write_text("half a tab")  # what a sink writing in place leaves
        raise RuntimeError("sink failed")
    assert names(tmp_path) == ["table.csv"] and table.read_text() == "earlier table\n"


def test_a_protected_new_file_is_removed_when_the_run_fails_and_kept_on_commit(tmp_path):
    table = tmp_path / "table.csv"
    with OutputSet() as outputs:
        outputs.protect(str(table))
        table.write_text("half a tab")
    assert names(tmp_path) == []
    (tmp_path / "earlier.csv").write_text("earlier\n")
    with OutputSet() as outputs:
        outputs.protect(str(tmp_path / "earlier.csv"))
        (tmp_path / "earlier.csv").write_text("new\n")
        outputs.commit_all()
    assert names(tmp_path) == ["earlier.csv"] and (tmp_path / "earlier.csv").read_text() == "new\n"
