"""Benchmark case: a grid job on a local Dask cluster of two workers against the same job in one process.

The published Meuse samples (tests/reference.py) as a GeoPackage and the project's Meuse log-zinc model as a
model file, kriged with all samples onto about 2 x 10^6 cells of 2.5 m with the variance: once by
``run_in_process`` and once by ``run_on_dask`` on a LocalCluster of two worker processes (one thread each).
The time of each and their ratio are reported (on a 2-core machine the cluster can at best match the
single process, whose BLAS already uses both cores); the case checks that both runs wrote the same rasters.
"""
from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))  # the repository loader, Meuse support
from repo_package import PACKAGE_NAME, REPO_ROOT, load_repo_package  # noqa: E402

load_repo_package()
from osgeo import gdal  # noqa: E402

from fieldcast.algorithms import (  # noqa: E402
    GridJob,
    MeanModel,
    ModelDocument,
    Transform,
    prepare_job,
    run_in_process,
    run_on_dask,
    to_wkt2,
)
from qgis_process_support import write_meuse_geopackage  # noqa: E402
from reference import MEUSE_LOG_ZINC  # noqa: E402

EXTENT = (178500.0, 329600.0, 181500.0, 333700.0)
PIXEL = 2.5


def _dask_against_one_process() -> tuple[str, bool]:
    with tempfile.TemporaryDirectory() as name:
        folder = Path(name)
        (folder / PACKAGE_NAME).symlink_to(REPO_ROOT, target_is_directory=True)
        sys.path.insert(0, str(folder))  # the workers import the package from here
        model = folder / "zinc.json"
        ModelDocument(MEUSE_LOG_ZINC, MeanModel("constant"), np.zeros(1), Transform("log"), to_wkt2("EPSG:28992"),
                      "metre", "zinc").save(str(model))
        samples = write_meuse_geopackage(folder / "meuse.gpkg").split("|")[0]
        seconds, bands = {}, {}
        for label, execute in (("one process", run_in_process), ("two workers", run_on_dask)):
            outputs = {kind: str(folder / f"{label}_{kind}.tif") for kind in ("prediction", "variance")}
            run = prepare_job(GridJob(str(model), samples, "zinc", outputs, EXTENT, PIXEL, map_area="extent"))
            started = time.perf_counter()
            execute(run)
            seconds[label] = time.perf_counter() - started
            bands[label] = [gdal.Open(path).ReadAsArray() for path in outputs.values()]
        cells = run.grid.n_cells
    same = all(np.array_equal(a, b) for a, b in zip(bands["one process"], bands["two workers"]))
    ratio = seconds["two workers"] / seconds["one process"]
    return (f"{cells:,} cells: {seconds['one process']:.1f} s in one process, {seconds['two workers']:.1f} s on two "
            f"local Dask workers (ratio {ratio:.2f}, cluster start included); rasters "
            f"{'equal' if same else 'DIFFER'}", same)


def cases() -> list[dict]:
    """The cluster benchmark case (see tools/bench.py)."""
    return [{"name": "cluster: Meuse grid job, 2x10^6 cells, two Dask workers vs one process",
             "target": "reported; rasters equal", "seconds": None, "memory_mb": None,
             "run": _dask_against_one_process}]
