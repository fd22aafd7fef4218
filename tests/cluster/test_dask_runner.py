"""A grid job on a Dask LocalCluster of two worker processes (one thread each): the rasters, as tiled GeoTIFFs
or as VRTs of per-block tiles, equal the single-process ones bit for bit, the nodata and extrapolation counts
are the same, and a cancel leaves no file.

Needs dask and distributed (python3-dask, python3-distributed); run by hand without them the tests skip, under
FIELDCAST_REQUIRE_ALL=1 they fail. The workers are separate processes: they import the repository under the
package name the tests use, through a folder on ``sys.path`` that links to it.
"""
from __future__ import annotations

import importlib.util
import sys
from dataclasses import replace

import pytest
from cluster_support import EXTENT, KINDS, PIXEL, job_outputs, same_rasters

from fieldcast.algorithms import (
    Cancelled,
    CovarianceModel,
    GridJob,
    Neighbourhood,
    Structure,
    prepare_job,
    run_in_process,
    run_on_dask,
)
from fieldcast.algorithms.predict import grid_surfaces
from repo_package import PACKAGE_NAME, REPO_ROOT
from requirements_check import skip_unless_available

pytestmark = skip_unless_available(importlib.util.find_spec("distributed") is not None,
                                   "dask and distributed are not installed (python3-dask, python3-distributed)")


@pytest.fixture(scope="module")
def scheduler(tmp_path_factory):
    """The address of a LocalCluster(n_workers=2, threads_per_worker=1) whose workers can import the package."""
    import distributed

    folder = tmp_path_factory.mktemp("importable")
    (folder / PACKAGE_NAME).symlink_to(REPO_ROOT, target_is_directory=True)
    sys.path.insert(0, str(folder))  # spawned workers start with this process's sys.path
    try:
        with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                      dashboard_address=None) as cluster:
            yield cluster.scheduler_address
    finally:
        sys.path.remove(str(folder))


@pytest.fixture
def blocks_of_256_rows(monkeypatch):
    """Blocks of one tile row (256 rows) on the 300-column test grid: two blocks, so two tasks and two tiles."""
    monkeypatch.setattr(grid_surfaces, "BLOCK_CELLS", 256 * 300)


def outputs_in(layout: str, folder, name: str) -> dict[str, str]:
    """The job's destinations for ``layout``: GeoTIFFs, or VRTs of the same names."""
    paths = job_outputs(folder, name)
    return paths if layout == "tiff" else {kind: path[:-len(".tif")] + ".vrt" for kind, path in paths.items()}


@pytest.mark.parametrize("layout", ["tiff", "vrt"])
@pytest.mark.parametrize(("neighbours", "area"), [(0, "hull"), (16, "extent")], ids=["global-hull", "local-extent"])
def test_dask_run_equals_the_single_process_run(job_files, scheduler, blocks_of_256_rows, layout, neighbours, area):
    job = GridJob(job_files.model, job_files.samples, "zinc", {}, EXTENT, PIXEL,
                  neighbourhood=Neighbourhood(neighbours), map_area=area)
    here = prepare_job(replace(job, outputs=job_outputs(job_files.folder, "here")))
    counts_here = run_in_process(here)
    spread = prepare_job(replace(job, outputs=outputs_in(layout, job_files.folder, "dask")))
    fractions = []
    counts_spread = run_on_dask(spread, scheduler=scheduler, layout=layout, progress=fractions.append)
    assert grid_surfaces.row_blocks(spread.grid) == [(0, 256), (256, 410)]  # two tasks
    assert (spread.inside is None) == (area == "extent")
    for kind, path in job_outputs(job_files.folder, "here").items():
        assert same_rasters(path, outputs_in(layout, job_files.folder, "dask")[kind]), kind
    assert spread.check.lines() == here.check.lines()
    assert counts_spread == counts_here and spread.singular == here.singular
    assert fractions == [256 / 410, 1.0]
    if layout == "vrt":  # per output a VRT and its two tiles beside it, nothing else
        written = {path.name for path in job_files.folder.iterdir() if path.name.startswith("dask_")}
        assert written == {f"dask_{kind}{end}" for kind in KINDS
                           for end in (".vrt", "_rows0000000.tif", "_rows0000256.tif")}


@pytest.mark.parametrize("layout", ["tiff", "vrt"])
def test_cancelled_dask_run_leaves_no_file(job_files, scheduler, blocks_of_256_rows, layout):
    run = prepare_job(GridJob(job_files.model, job_files.samples, "zinc",
                              outputs_in(layout, job_files.folder, "stop"), EXTENT, PIXEL))
    asked = []
    with pytest.raises(Cancelled):  # cancelled after the first block is written
        run_on_dask(run, scheduler=scheduler, layout=layout, should_stop=lambda: len(asked) > 0,
                    progress=asked.append)
    assert asked == [256 / 410]
    assert list(job_files.folder.iterdir()) == []  # no output, no tile and no temporary file


def test_singular_neighbour_systems_are_counted_on_the_workers(job_files, scheduler, blocks_of_256_rows):
    # Not a fitted model: a Gaussian correlation without nugget, chosen so that some local systems of 30 Meuse
    # neighbours are numerically singular (the Gaussian family's matrices are notoriously ill-conditioned, from
    # memory) and their cells are left nodata.
    document = replace(job_files.document, covariance=CovarianceModel((Structure("gaussian", 0.6, 1000.0),)))
    document.save(job_files.model)
    job = GridJob(job_files.model, job_files.samples, "zinc", {}, EXTENT, PIXEL, neighbourhood=Neighbourhood(30),
                  map_area="extent")
    here = prepare_job(replace(job, outputs={"prediction": str(job_files.folder / "here.tif")}))
    counts_here = run_in_process(here)
    spread = prepare_job(replace(job, outputs={"prediction": str(job_files.folder / "dask.tif")}))
    counts_spread = run_on_dask(spread, scheduler=scheduler)
    assert 0 < spread.singular == here.singular <= counts_here.unresolved
    assert counts_spread == counts_here
    assert same_rasters(job_files.folder / "here.tif", job_files.folder / "dask.tif")
