"""A grid job run in this process: the same rasters as the engine's write_surfaces on the same arrays, and
nothing left on a cancel.

The Meuse samples are the published data set (tests/data/README.md); the numbers write_surfaces gives are
checked against scipy.stats in tests/predict/test_grid_surfaces.py, so here the job must reproduce them exactly.
"""
from __future__ import annotations

import pytest
from cluster_support import EXTENT, KINDS, PIXEL, job_outputs, read_raster, same_rasters

from fieldcast.algorithms import (
    Cancelled,
    ExtrapolationCheck,
    FieldRasters,
    GridJob,
    GridSpec,
    KrigingPredictor,
    MeanModel,
    SurfaceScale,
    Transform,
    cell_predictor,
    prepare_job,
    run_in_process,
    write_surfaces,
)
from qgis_process_support import COLUMNS, ROWS, write_template
from reference import MEUSE_LOG_ZINC


def test_in_process_run_equals_write_surfaces_on_the_same_arrays(job_files, meuse):
    outputs = job_outputs(job_files.folder, "job")
    run = prepare_job(GridJob(job_files.model, job_files.samples, "zinc", outputs, EXTENT, PIXEL, map_area="extent"))
    run_in_process(run)
    # The same kriging written by the engine's writer directly from the Meuse arrays, without files in between.
    grid = GridSpec.from_extent(*EXTENT, PIXEL)
    transform = Transform("log")
    values = transform.forward(meuse.zinc)
    predictor = KrigingPredictor(meuse.xy, values, MEUSE_LOG_ZINC, MeanModel("constant"))
    check = ExtrapolationCheck.for_samples(meuse.xy, values, MEUSE_LOG_ZINC, MeanModel("constant"), transform,
                                           ["zinc"])
    direct = job_outputs(job_files.folder, "direct")
    paths = {kind: path for kind, path in direct.items() if kind != "distance"}
    write_surfaces(cell_predictor(predictor), grid, None, SurfaceScale(transform), job_files.document.crs_wkt,
                   [FieldRasters("zinc", paths, {})], check=check, distance_path=direct["distance"])
    assert run.grid == grid and grid.n_rows > 256 and grid.n_cols > 256  # several tiles and blocks of rows
    for kind in KINDS:
        assert same_rasters(outputs[kind], direct[kind]), kind
    assert run.check.lines() == check.lines()


def test_cancel_during_the_run_leaves_no_file(job_files):
    outputs = job_outputs(job_files.folder, "cancelled")
    run = prepare_job(GridJob(job_files.model, job_files.samples, "zinc", outputs, EXTENT, PIXEL))
    asked = []

    def second_call() -> bool:  # the run asks before each block and each chunk of cells
        asked.append(True)
        return len(asked) > 1

    with pytest.raises(Cancelled):
        run_in_process(run, should_stop=second_call)
    assert list(job_files.folder.iterdir()) == []  # no output and no temporary file


@pytest.mark.parametrize("nodata", ["mask", "map"])
def test_template_nodata_cells_stay_nodata_unless_mapped(job_files, tmp_path, nodata):
    template = write_template(tmp_path / "template.tif")  # its top-left 10 x 20 cells hold the nodata value
    paths = job_outputs(job_files.folder, "template")
    run = prepare_job(GridJob(job_files.model, job_files.samples, "zinc", {"prediction": paths["prediction"]},
                              template=template, map_area="extent", template_nodata=nodata))
    run_in_process(run)
    values = read_raster(paths["prediction"])[0]
    if nodata == "map":
        assert run.inside is None and (values != -9999).all()
    else:
        assert run.inside.shape == (ROWS, COLUMNS) and not run.inside[:10, :20].any()
        assert run.inside.sum() == ROWS * COLUMNS - 200
        assert (values[:10, :20] == -9999).all() and (values[10:] != -9999).all()
        assert any(line.text.startswith("Template nodata: 200 of 6,860 cells") for line in run.lines)
