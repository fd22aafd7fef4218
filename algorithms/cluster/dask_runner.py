"""Running a prepared grid job on Dask: the output as a ``dask.array`` with one chunk per block of rows, stored
into the rasters here.

Once the model, the samples and the neighbour index exist (the predictor of :class:`.job.GridRun`), the blocks
of a grid are independent. The predictor, the scale and the check are sent to every worker once
(``Client.scatter(broadcast=True)``); each block is one task running the engine's block function
(:func:`..predict.grid_surfaces.krige_block`, the one :func:`..predict.grid_surfaces.write_surfaces` runs), whose
rasters (prediction, variance, ..., distance) are the leading axis of the block's chunk of one
``dask.array`` (``da.from_delayed`` per block, the blocks of :func:`..predict.grid_surfaces.row_blocks`), and
whose counts (nodata, extrapolation, singular neighbour systems) come from the same task. The array is computed
on the cluster and written here with ``da.store`` into :class:`.stored_rasters.StoreTarget`: one tiled GeoTIFF
per output, or per output one GeoTIFF per block and a VRT of them (``layout="vrt"``). The files are the ones a
single process writes, and they appear together at the end, or not at all (error, cancel).

Dask (``dask`` and ``distributed``) is optional: it is imported only here, when a Dask run is asked for.
Workers on other machines need numpy, scipy, GDAL and pyproj, and the plugin folder importable under the
same name as here.
"""
from __future__ import annotations

import contextlib
import warnings
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from types import ModuleType

import numpy as np

from ..errors import Cancelled, FieldcastError
from ..io.grid import GridSpec
from ..io.nodata_counts import NodataCounts
from ..predict.extrapolation import ExtrapolationCheck
from ..predict.grid_surfaces import FieldRasters, SurfaceScale, cell_predictor, krige_block, row_blocks
from ..predict.kriging import KrigingPredictor
from ..predict.local import LocalKrigingPredictor
from .job import GridRun, singular_targets
from .stored_rasters import LAYOUTS, StoreTarget, layer_keys, stacked, surface_writers

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
    keys: list[tuple[int, str]]
    distance: bool


@dataclass(frozen=True)
class BlockTally:
    """What a task counted besides its rasters."""

    counts: NodataCounts
    check: ExtrapolationCheck
    singular: int


def krige_task(inputs: TaskInputs, start: int, stop: int,
               inside: np.ndarray | None) -> tuple[np.ndarray, BlockTally]:
    """One Dask task: rows ``start`` to ``stop - 1`` (their cell mask ``inside``) kriged by the engine's block
    function, as the chunk ``(layers, rows, n_cols)`` of :func:`.stored_rasters.stacked` and the block's counts
    (extrapolation counts in a fresh copy of the check: the workers' copies are not the run's)."""
    check = inputs.check.emptied()
    before = singular_targets(inputs.predictor)
    block = krige_block(cell_predictor(inputs.predictor), inputs.grid, start, stop, inputs.scale, inputs.fields,
                        inside=inside, check=check, distance=inputs.distance)
    tally = BlockTally(block.counts, check, singular_targets(inputs.predictor) - before)
    return stacked(block, inputs.keys, inputs.grid.n_cols), tally


def rows_inside(inside: np.ndarray | None, start: int, stop: int) -> np.ndarray | None:
    """The cell mask of rows ``start`` to ``stop - 1`` (None: every cell), the only part a task is sent."""
    return None if inside is None else inside[start:stop]


def surface_array(dask: ModuleType, inputs, run: GridRun, blocks: Sequence[tuple[int, int]], layers: int):
    """The run's rasters as one ``dask.array`` ``(layers, n_rows, n_cols)``, one chunk per block of rows, and the
    delayed :class:`BlockTally` of each block (the same tasks)."""
    import dask.array as da

    chunks, tallies = [], []
    for start, stop in blocks:
        chunk, tally = dask.delayed(krige_task, nout=2)(inputs, start, stop, rows_inside(run.inside, start, stop))
        chunks.append(da.from_delayed(chunk, (layers, stop - start, run.grid.n_cols), dtype=float))
        tallies.append(tally)
    return da.concatenate(chunks, axis=1), tallies


class ChunkFetcher:
    """The chunks computed on the cluster, fetched here one by one (each released once fetched), watching for a
    cancel while waiting."""

    def __init__(self, futures: list, should_stop: Callable[[], bool] | None):
        self.futures = dict(enumerate(futures))
        self.should_stop = should_stop

    def chunk(self, index: int) -> np.ndarray:
        """Chunk ``index``; raises Cancelled when ``should_stop()`` turns true while waiting for it."""
        future = self.futures.pop(index)
        while True:
            if self.should_stop is not None and self.should_stop():
                raise Cancelled("Prediction was cancelled.")
            try:
                return future.result(timeout=0.5)
            except TimeoutError:
                continue


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


def run_on_dask(run: GridRun, *, workers: int = 2, scheduler: str = "", layout: str = "tiff",
                progress: Callable[[float], None] | None = None,
                should_stop: Callable[[], bool] | None = None) -> NodataCounts:
    """Krige ``run`` as a ``dask.array`` on a Dask cluster and store its rasters here; returns the nodata counts.

    ``scheduler`` is the address of a running Dask scheduler (e.g. ``tcp://10.0.0.5:8786``); empty starts a
    local cluster of ``workers`` processes. ``layout`` is one of :data:`.stored_rasters.LAYOUTS`: ``"tiff"``
    writes each output as one tiled GeoTIFF, ``"vrt"`` each output (its path a ``.vrt``) as a VRT of one GeoTIFF
    per block of rows beside it. ``run.check`` holds the extrapolation counts afterwards and ``run.singular``
    the cells left nodata for a singular neighbour system, counted on the workers.

    Raises
    ------
    FieldcastError
        Without Dask (install advice), when the scheduler cannot be reached, or from a task; no file is left.
    Cancelled
        When ``should_stop()`` turns true; the remaining tasks are cancelled and no file is left.
    """
    if layout not in LAYOUTS:
        raise FieldcastError(f"The layout {layout!r} is unknown; choose one of {', '.join(LAYOUTS)}.")
    distributed = import_distributed()
    import dask
    import dask.array as da

    blocks = row_blocks(run.grid, len(run.fields))
    keys = layer_keys(run.fields, bool(run.distance_path))
    with surface_writers(run, layout) as writers, dask_client(distributed, workers, scheduler) as client:
        inputs = client.scatter(TaskInputs(run.predictor, run.grid, run.scale, run.fields, run.check, keys,
                                           bool(run.distance_path)), broadcast=True)
        surfaces, tallies = surface_array(dask, inputs, run, blocks, len(keys))
        futures = client.compute([*surfaces.to_delayed().ravel().tolist(), *tallies])
        try:
            fetcher = ChunkFetcher(futures[:len(blocks)], should_stop)
            fetched = da.concatenate([da.from_delayed(dask.delayed(fetcher.chunk)(index),
                                                      (len(keys), stop - start, run.grid.n_cols), dtype=float)
                                      for index, (start, stop) in enumerate(blocks)], axis=1)
            target = StoreTarget(writers, keys, run.grid.n_rows, progress)
            with warnings.catch_warnings():  # the writes run here, in order, while the client computes the chunks
                warnings.filterwarnings("ignore", "Running on a single-machine scheduler")
                da.store(fetched, target, lock=target.lock, scheduler="sync")
            counted = [future.result() for future in futures[len(blocks):]]
        finally:
            client.cancel(futures)
        for tally in counted:
            writers.counts.append(tally.counts)
            run.check.absorb(tally.check)
        run.singular = sum(tally.singular for tally in counted)
        return writers.finish()
