"""Running a prepared grid job on Dask: one task per block of rows, the rasters written here as blocks arrive.

Once the model, the samples and the neighbour index exist (the predictor of :class:`.job.GridRun`), the blocks
of a grid are independent. The predictor, the scale and the check are sent to every worker once
(``Client.scatter(broadcast=True)``); each task runs the engine's block function
(:func:`..predict.grid_surfaces.krige_block`, the one :func:`..predict.grid_surfaces.write_surfaces` runs) on
its rows and returns the block with its own extrapolation counts. This process writes every block into the
outputs' tiled GeoTIFFs as it arrives (:class:`..predict.grid_surfaces.SurfaceWriters`), so the files are the
ones a single process writes, and they appear together at the end, or not at all (error, cancel).

Dask (``dask`` and ``distributed``) is optional: it is imported only here, when a Dask run is asked for.
Workers on other machines need numpy, scipy, GDAL and pyproj, and the plugin folder importable under the
same name as here.
"""
from __future__ import annotations

import contextlib
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from types import ModuleType

import numpy as np

from ..errors import Cancelled, FieldcastError
from ..io.grid import GridSpec
from ..io.nodata_counts import NodataCounts
from ..predict.extrapolation import ExtrapolationCheck
from ..predict.grid_surfaces import (
    FieldRasters,
    SurfaceBlock,
    SurfaceScale,
    SurfaceWriters,
    cell_predictor,
    krige_block,
    row_blocks,
)
from ..predict.kriging import KrigingPredictor
from ..predict.local import LocalKrigingPredictor
from .job import GridRun

INSTALL_ADVICE = ("Install them (Debian and Ubuntu: apt install python3-dask python3-distributed; elsewhere: "
                  "python -m pip install \"dask[distributed]\"), or leave out --workers and --scheduler to run in "
                  "this process.")


def import_distributed() -> ModuleType:
    """The ``distributed`` package (Dask's scheduler and workers), imported now.

    Raises
    ------
    FieldcastError
        When Dask is not installed, saying how to install it.
    """
    try:
        import dask  # noqa: F401  (distributed needs it; its absence is the usual case)
        import distributed
    except ImportError as exc:
        raise FieldcastError(f"A Dask run needs the dask and distributed packages, which are not installed "
                             f"({exc}). {INSTALL_ADVICE}") from exc
    return distributed


@dataclass(frozen=True)
class TaskInputs:
    """What every task needs, sent to each worker once."""

    predictor: KrigingPredictor | LocalKrigingPredictor
    grid: GridSpec
    scale: SurfaceScale
    fields: list[FieldRasters]
    check: ExtrapolationCheck
    distance: bool


def krige_task(inputs: TaskInputs, start: int, stop: int,
               inside: np.ndarray | None) -> tuple[SurfaceBlock, ExtrapolationCheck]:
    """One Dask task: rows ``start`` to ``stop - 1`` (their cell mask ``inside``) kriged by the engine's block
    function, with the counts of a fresh copy of the check (the workers' copies are not the run's)."""
    check = inputs.check.emptied()
    block = krige_block(cell_predictor(inputs.predictor), inputs.grid, start, stop, inputs.scale, inputs.fields,
                        inside=inside, check=check, distance=inputs.distance)
    return block, check


def rows_inside(inside: np.ndarray | None, start: int, stop: int) -> np.ndarray | None:
    """The cell mask of rows ``start`` to ``stop - 1`` (None: every cell), the only part a task is sent."""
    return None if inside is None else inside[start:stop]


@contextlib.contextmanager
def dask_client(distributed: ModuleType, workers: int = 2, scheduler: str = "") -> Iterator:
    """A client of the scheduler at ``scheduler``, or of a local cluster of ``workers`` processes (one thread
    each), closed after the block.

    Raises
    ------
    FieldcastError
        When the scheduler cannot be reached or the local cluster cannot start.
    """
    with contextlib.ExitStack() as stack:
        try:
            if scheduler:
                client = stack.enter_context(distributed.Client(scheduler, timeout="20s"))
            else:
                cluster = stack.enter_context(distributed.LocalCluster(
                    n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=None))
                client = stack.enter_context(distributed.Client(cluster))
        except (OSError, TimeoutError) as exc:
            where = f"the Dask scheduler at {scheduler}" if scheduler else f"a local Dask cluster of {workers} workers"
            raise FieldcastError(f"Could not reach {where}: {exc}. Check the address given to --scheduler and that "
                                 "the scheduler runs, or use --workers for a cluster on this machine.") from exc
        yield client


def run_on_dask(run: GridRun, *, workers: int = 2, scheduler: str = "",
                progress: Callable[[float], None] | None = None,
                should_stop: Callable[[], bool] | None = None) -> NodataCounts:
    """Krige ``run`` as Dask tasks and write its rasters here as blocks arrive; returns the nodata counts.

    ``scheduler`` is the address of a running Dask scheduler (e.g. ``tcp://10.0.0.5:8786``); empty starts a
    local cluster of ``workers`` processes. ``run.check`` holds the extrapolation counts afterwards.

    Raises
    ------
    FieldcastError
        Without Dask (install advice), when the scheduler cannot be reached, or from a task; no file is left.
    Cancelled
        When ``should_stop()`` turns true; the remaining tasks are cancelled and no file is left.
    """
    distributed = import_distributed()
    blocks = row_blocks(run.grid, len(run.fields))
    with SurfaceWriters(run.grid, run.scale, run.crs_wkt, run.fields, run.distance_path) as writers, \
            dask_client(distributed, workers, scheduler) as client:
        inputs = client.scatter(TaskInputs(run.predictor, run.grid, run.scale, run.fields, run.check,
                                           bool(run.distance_path)), broadcast=True)
        futures = [client.submit(krige_task, inputs, start, stop, rows_inside(run.inside, start, stop), pure=False)
                   for start, stop in blocks]
        try:
            for done, future in enumerate(distributed.as_completed(futures), start=1):
                if should_stop is not None and should_stop():
                    raise Cancelled("Prediction was cancelled.")
                block, counted = future.result()
                writers.write(block)
                run.check.absorb(counted)
                if progress is not None:
                    progress(done / len(blocks))
        finally:
            client.cancel(futures)
        return writers.finish()
