"""Where the blocks of a Dask run go: the layers of a block stacked as one array chunk, and the target
``dask.array.store`` writes the chunks into (one tiled GeoTIFF per output, or per-block tiles plus a VRT)."""
from __future__ import annotations

import threading
from collections.abc import Callable, Sequence

import numpy as np

from ..io.grid import GridSpec
from ..io.tiled_raster import TiledRaster
from ..predict.grid_surfaces import FieldRasters, SurfaceBlock, SurfaceScale, SurfaceWriters, row_blocks
from .job import GridRun

LAYOUTS = ("tiff", "vrt")
"""How a Dask run's rasters are written: one tiled GeoTIFF per output, or per output a VRT of one GeoTIFF per
block of rows."""
DISTANCE = -1
"""The field index of the distance layer in :func:`layer_keys`."""


def layer_keys(fields: Sequence[FieldRasters], distance: bool) -> list[tuple[int, str]]:
    """The layers of a run's array, in order: ``(field index, kind)`` per raster, then ``(DISTANCE, "distance")``."""
    keys = [(index, kind) for index, output in enumerate(fields) for kind in output.kinds]
    return [*keys, (DISTANCE, "distance")] if distance else keys


def stacked(block: SurfaceBlock, keys: Sequence[tuple[int, str]], n_cols: int) -> np.ndarray:
    """The rasters of ``block`` as one chunk ``(layers, rows, n_cols)`` in the order of ``keys``."""
    layers = [block.distance if index == DISTANCE else block.bands[index][kind] for index, kind in keys]
    return np.stack(layers).reshape(len(keys), -1, n_cols)


class TiledSurfaceWriters(SurfaceWriters):
    """:class:`..predict.grid_surfaces.SurfaceWriters` whose rasters are VRTs of one GeoTIFF per block of rows
    (:class:`..io.tiled_raster.TiledRaster`), the blocks of :func:`..predict.grid_surfaces.row_blocks`."""

    def __init__(self, grid: GridSpec, scale: SurfaceScale, crs_wkt: str, fields: Sequence[FieldRasters],
                 distance_path: str = ""):
        self._blocks = row_blocks(grid, len(fields))
        super().__init__(grid, scale, crs_wkt, fields, distance_path)

    def _open(self, path: str, grid: GridSpec, crs_wkt: str, description: str, metadata) -> TiledRaster:
        writer = self._stack.enter_context(TiledRaster(path, grid, self._blocks, crs_wkt, description, metadata))
        self._writers.append(writer)
        return writer


def surface_writers(run: GridRun, layout: str) -> SurfaceWriters:
    """The writers of ``run``'s rasters in ``layout`` (one of :data:`LAYOUTS`)."""
    kind = TiledSurfaceWriters if layout == "vrt" else SurfaceWriters
    return kind(run.grid, run.scale, run.crs_wkt, run.fields, run.distance_path)


class StoreTarget:
    """The target of ``dask.array.store``: a chunk ``(layers, rows, n_cols)`` written into the run's writers.

    GDAL handles are not shared between threads, so writes go one at a time: pass :attr:`lock` to ``store``,
    which holds it around each ``target[key] = chunk``. ``progress`` gets the fraction of the rows written.
    """

    def __init__(self, writers: SurfaceWriters, keys: Sequence[tuple[int, str]], n_rows: int,
                 progress: Callable[[float], None] | None = None):
        self.writers = writers
        self.keys = list(keys)
        self.n_rows = n_rows
        self.progress = progress
        self.lock = threading.Lock()
        self.rows_written = 0

    def __setitem__(self, key: tuple[slice, slice, slice], chunk: np.ndarray) -> None:
        start = key[1].start or 0
        for (index, kind), layer in zip(self.keys, chunk):
            writer = self.writers.distance if index == DISTANCE else self.writers.fields[index][kind]
            writer.write_block(0, start, layer)
        self.rows_written += chunk.shape[1]
        if self.progress is not None:
            self.progress(self.rows_written / self.n_rows)
