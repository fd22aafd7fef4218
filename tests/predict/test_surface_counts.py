"""Nodata counts of kriged rasters: values a Float32 GeoTIFF cannot hold are counted, warned about, or refused.

The Float32 limit is numpy's ``finfo(float32).max`` (IEEE 754 single precision, about 3.4e38). Predictors
here hand back fixed numbers: only the counting and the refusal are under test, not kriging.
"""
from __future__ import annotations

import numpy as np
import pytest

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.io.crs import to_wkt2
from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.io.nodata_counts import NodataCounts
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.grid_surfaces import FieldRasters, SurfaceScale, write_surfaces

GRID = GridSpec(x_min=0.0, y_max=100.0, pixel_size=10.0, n_cols=10, n_rows=10)


def fixed_predictor(variance: float, unresolved_every: int = 0):
    """A predictor giving mean 1 and ``variance`` at every target, NaN at every ``unresolved_every``-th one."""
    def predict(centres, progress, should_stop):
        var = np.full(len(centres), variance)
        if unresolved_every:
            var[::unresolved_every] = np.nan
        return np.where(np.isnan(var), np.nan, 1.0), var
    return predict


def run(tmp_path, variance: float, inside=None, unresolved_every: int = 0) -> NodataCounts:
    paths = {"prediction": str(tmp_path / "p.tif"), "variance": str(tmp_path / "v.tif")}
    return write_surfaces(fixed_predictor(variance, unresolved_every), GRID, inside, SurfaceScale(Transform()),
                          to_wkt2("EPSG:28992"), [FieldRasters("zinc", paths, {})])


def test_writable_rasters_count_nothing(tmp_path):
    inside = np.zeros((10, 10), bool)
    inside[:5] = True
    counts = run(tmp_path, 4.0, inside=inside, unresolved_every=10)
    assert (counts.computed, counts.unresolved) == (50, 5)
    assert counts.unwritable == {"zinc prediction": 0, "zinc variance": 0}
    assert counts.warnings() == [] and counts.error() is None


def test_a_raster_beyond_float32_everywhere_is_refused_and_leaves_no_file(tmp_path):
    with pytest.raises(FieldcastError) as error:
        run(tmp_path, 1e50)
    assert "The zinc variance raster(s) would be nodata at every cell" in str(error.value)
    assert "beyond \u00b13.4e+38" in str(error.value) and "sill" in str(error.value)
    assert list(tmp_path.iterdir()) == []


def test_rasters_mostly_nodata_are_warned_about():
    counts = NodataCounts(computed=100, unresolved=10, unwritable={"zinc prediction": 0, "zinc variance": 60})
    assert counts.error() is None
    (warning,) = counts.warnings()
    assert warning.startswith("The zinc variance raster is nodata at 60 of 90 computed cells")
    assert NodataCounts(100, 10, {"zinc variance": 45}).warnings() == []


def test_counts_of_whole_rasters_leave_out_the_mask_and_the_unresolved_cells():
    inside = np.array([[True, True, True], [True, True, False]])
    unresolved = np.array([[False, False, False], [False, True, False]])
    bands = np.ones((2, 2, 3))
    bands[1, 0, 0] = 1e39  # one band of one cell beyond Float32
    bands[:, 1, 2] = np.inf  # outside the mask: not counted
    bands[:, 1, 1] = np.nan  # unresolved: not counted
    counts = NodataCounts.of_rasters({"zinc realisations": bands, "zinc mean": bands.mean(axis=0)}, inside, unresolved)
    assert (counts.computed, counts.unresolved) == (5, 1)
    assert counts.unwritable == {"zinc realisations": 1, "zinc mean": 1}
    assert counts.error() is None and counts.warnings() == []
