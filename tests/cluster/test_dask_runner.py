"""A grid job on a Dask LocalCluster of two worker processes (one thread each): the rasters equal the
single-process ones bit for bit, the extrapolation counts are the same, and a cancel leaves no file.

Needs dask and distributed (python3-dask, python3-distributed); run by hand without them the tests skip, under
FIELDCAST_REQUIRE_ALL=1 they fail. The workers are separate processes: they import the repository under the
package name the tests use, through a folder on ``sys.path`` that links to it.
"""
from __future__ import annotations

import importlib.util
import sys
from dataclasses import replace

import pytest
from cluster_support import EXTENT, PIXEL, job_outputs, same_rasters

from fieldcast.algorithms import Cancelled, GridJob, Neighbourhood, prepare_job, run_in_process, run_on_dask
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


@pytest.mark.parametrize(("neighbours", "area"), [(0, "hull"), (16, "extent")], ids=["global-hull", "local-extent"])
def test_dask_run_equals_the_single_process_run(job_files, scheduler, neighbours, area):
    job = GridJob(job_files.model, job_files.samples, "zinc", {}, EXTENT, PIXEL,
                  neighbourhood=Neighbourhood(neighbours), map_area=area)
    here = prepare_job(replace(job, outputs=job_outputs(job_files.folder, "here")))
    run_in_process(here)
    spread = prepare_job(replace(job, outputs=job_outputs(job_files.folder, "dask")))
    fractions = []
    run_on_dask(spread, scheduler=scheduler, progress=fractions.append)
    assert spread.grid.n_rows > 256  # at least two blocks of rows, so two tasks
    assert (spread.inside is None) == (area == "extent")
    for kind, path in job_outputs(job_files.folder, "here").items():
        assert same_rasters(path, job_outputs(job_files.folder, "dask")[kind]), kind
    assert spread.check.lines() == here.check.lines()
    assert fractions[-1] == 1.0


def test_cancelled_dask_run_leaves_no_file(job_files, scheduler):
    run = prepare_job(GridJob(job_files.model, job_files.samples, "zinc", job_outputs(job_files.folder, "stop"),
                              EXTENT, PIXEL))
    with pytest.raises(Cancelled):
        run_on_dask(run, scheduler=scheduler, should_stop=lambda: True)
    assert list(job_files.folder.iterdir()) == []  # no output and no temporary file
