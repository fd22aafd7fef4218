"""A raster written as one GeoTIFF per block of rows plus a GDAL VRT that mosaics them.

The VRT at the destination (e.g. ``zinc.vrt``) lists tiles beside it named ``zinc_rows0000000.tif``,
``zinc_rows0000256.tif``, ... (the first row of each block), referenced relative to the VRT, so the folder
can be moved as a whole. Every tile and the VRT are staged (:mod:`.staging`): they appear together with
the run's other files, or not at all.
"""
from __future__ import annotations

import os
import uuid
from collections.abc import Mapping, Sequence

import numpy as np
from osgeo import gdal

from ..errors import FieldcastUsageError
from .atomic import write_text_atomically
from .geotiff import GeoTiffWriter, gdal_errors, metadata_items
from .grid import GridSpec


def tile_path(path: str, start: int) -> str:
    """The tile of the block starting at row ``start`` of the VRT ``path``: ``<stem>_rows<start:07d>.tif``."""
    return f"{os.path.splitext(os.path.abspath(path))[0]}_rows{start:07d}.tif"


def block_grid(grid: GridSpec, start: int, stop: int) -> GridSpec:
    """Rows ``start`` to ``stop - 1`` of ``grid`` as a grid of their own."""
    return GridSpec(grid.x_min, grid.y_max - start * grid.pixel_size, grid.pixel_size, grid.n_cols, stop - start)


class TiledRaster:
    """A one-band raster written block by block into tiles, and the VRT of them on :meth:`commit`.

    It writes like a one-band :class:`.geotiff.GeoTiffWriter` (``write_block(0, row_start, array)`` for
    whole blocks of ``blocks``, then ``commit``), so grid writers can take either. Use it as a context
    manager inside an :class:`.staging.OutputSet` (as the grid writers do): leaving it without the set's
    commit leaves no tile.

    Parameters
    ----------
    path : str
        Destination of the VRT.
    grid : GridSpec
        The whole raster.
    blocks : sequence of (int, int)
        The ``(row_start, row_stop)`` blocks, one tile each.
    crs_wkt, description, metadata
        As for :class:`.geotiff.GeoTiffWriter` (one band).
    """

    def __init__(self, path: str, grid: GridSpec, blocks: Sequence[tuple[int, int]], crs_wkt: str,
                 description: str, metadata: Mapping[str, object] | None = None):
        self.path = os.path.abspath(path)
        self.grid = grid
        self._blocks = dict(blocks)
        self._crs_wkt = crs_wkt
        self._description = description
        self._metadata = metadata
        self._tiles: dict[int, str] = {}  # row_start -> the tile's staged file

    def __enter__(self) -> TiledRaster:
        return self

    def __exit__(self, exc_type, exc_value, traceback) -> None:
        """Nothing to undo here: a tile is complete and staged, or its writer removed it."""

    def write_block(self, band_index: int, row_start: int, array: np.ndarray) -> None:
        """Write the block of rows starting at ``row_start`` (all its rows) as its tile, staged at once."""
        if band_index != 0 or row_start not in self._blocks or row_start in self._tiles:
            raise FieldcastUsageError(f"band {band_index}, rows from {row_start}: not a block of {self.path} left "
                                      "to write")
        stop = self._blocks[row_start]
        with GeoTiffWriter(tile_path(self.path, row_start), block_grid(self.grid, row_start, stop), 1,
                           self._crs_wkt, [self._description], self._metadata) as tile:
            tile.write_block(0, 0, array)
            tile.commit()
        self._tiles[row_start] = tile.staged_path

    def commit(self) -> str:
        """Write the VRT of the tiles (staged like them); returns its destination.

        Raises
        ------
        FieldcastError
            If GDAL cannot build the VRT or it cannot be saved.
        """
        missing = sorted(set(self._blocks) - set(self._tiles))
        if missing:
            raise FieldcastUsageError(f"{len(missing)} tiles of {self.path} were never written, first from row "
                                      f"{missing[0]}")
        starts = sorted(self._tiles)
        memory = f"/vsimem/fieldcast-{uuid.uuid4().hex}.vrt"
        with gdal_errors(f"build the VRT {self.path}"):
            vrt = gdal.BuildVRT(memory, [self._tiles[start] for start in starts])
            vrt.GetRasterBand(1).SetDescription(self._description)
            vrt.SetMetadata(metadata_items(self._metadata))
            text = vrt.GetMetadata("xml:VRT")[0]
            vrt = None
            gdal.Unlink(memory)
        for start in starts:  # the tiles' final names, beside the VRT
            text = text.replace(f'relativeToVRT="0">{self._tiles[start]}<',
                                f'relativeToVRT="1">{os.path.basename(tile_path(self.path, start))}<')
        write_text_atomically(self.path, text, "the VRT")
        return self.path
