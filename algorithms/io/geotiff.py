"""Writing result rasters as tiled, compressed Float32 GeoTIFF files with GDAL.

Files are written under a temporary name in the destination folder and moved into
place only when complete, so an error or a cancel leaves no file (and an existing
file of the same name untouched). Inside an :class:`.staging.OutputSet` a committed
file waits for the set's commit, with the run's other outputs.

Layout: Float32, 256 x 256 tiles, DEFLATE compression with the floating-point
predictor, band-interleaved. Missing cells (NaN or infinite values in the arrays
given) are stored as :data:`NODATA` = -9999, which every band declares as its nodata
value; readers should mask cells equal to ``band.GetNoDataValue()`` (a fixed number
rather than NaN, so that tools comparing values with ``==`` also recognise it).

GDAL errors are caught locally: the GDAL exception setting of the host (QGIS or
other code) is left as it is; on GDAL >= 3.7 exceptions are switched on only inside
this module's calls, via ``gdal.ExceptionMgr``.
"""
from __future__ import annotations

import contextlib
import json
import os
from collections.abc import Iterator, Mapping, Sequence

import numpy as np
from osgeo import gdal

from ..errors import FieldcastError, FieldcastUsageError
from ..version import __version__
from .crs import to_wkt2
from .grid import GridSpec
from .staging import place, temporary_path

NODATA = -9999.0
MAX_BANDS = 65_535
"""Most bands one GeoTIFF file holds (the TIFF SamplesPerPixel tag is a 16-bit number)."""
CREATION_OPTIONS = ["TILED=YES", "BLOCKXSIZE=256", "BLOCKYSIZE=256", "COMPRESS=DEFLATE", "PREDICTOR=3",
                    "INTERLEAVE=BAND", "BIGTIFF=IF_SAFER"]
VERSION_KEY = "fieldcast_version"
SIDE_SUFFIXES = (".aux.xml",)
"""GDAL side files that follow a raster into place."""


@contextlib.contextmanager
def gdal_errors(action: str) -> Iterator[None]:
    """Turn GDAL failures inside the block into :class:`FieldcastError` naming ``action``.

    Collects messages with a pushed (thread-local) error handler, which is popped on
    exit, and also converts the ``RuntimeError`` GDAL raises when exceptions are on.
    """
    failures: list[str] = []

    def collect(error_class: int, _error_no: int, message: str) -> None:
        if error_class >= gdal.CE_Failure:
            failures.append(message)

    with contextlib.ExitStack() as stack:
        if hasattr(gdal, "ExceptionMgr"):
            stack.enter_context(gdal.ExceptionMgr(useExceptions=True))
        gdal.PushErrorHandler(collect)
        stack.callback(gdal.PopErrorHandler)
        try:
            yield
        except RuntimeError as exc:
            failures.append(str(exc))
    if failures:
        reasons = "; ".join(dict.fromkeys(failures))  # each distinct message once
        raise FieldcastError(f"GDAL could not {action}: {reasons}. Check that the disk has free space and the "
                             "output folder is writable, or choose another output file.")


def check_destination(path: str) -> None:
    """Raise :class:`FieldcastError` unless a file can be created at ``path``."""
    if not path or os.path.isdir(path):
        raise FieldcastError(f"The output {path!r} is not a file name. Give a file name ending in .tif.")
    folder = os.path.dirname(path)
    if not os.path.isdir(folder):
        raise FieldcastError(f"The output folder {folder} does not exist. Choose an existing folder or "
                             "create it first.")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise FieldcastError(f"The output folder {folder} is not writable. Choose a folder where you can "
                             "save files.")


def metadata_items(metadata: Mapping[str, object] | None) -> dict[str, str]:
    """GDAL metadata tags: the Fieldcast version plus ``metadata``; non-text values become JSON."""
    items = {VERSION_KEY: __version__}
    for key, value in (metadata or {}).items():
        if not isinstance(key, str) or not key or "=" in key or any(c.isspace() for c in key):
            raise FieldcastUsageError(f"metadata key {key!r} must be non-empty text without spaces or '='")
        items[key] = value if isinstance(value, str) else json.dumps(value)
    return items


class GeoTiffWriter:
    """Writes a GeoTIFF in row blocks; the file appears at ``path`` only on :meth:`commit`.

    Use it as a context manager. Leaving the ``with`` block without a commit (an
    exception, or returning early on cancel) deletes the temporary file::

        with GeoTiffWriter(path, grid, 2, crs_wkt, ["prediction", "variance"]) as writer:
            for start in range(0, grid.n_rows, 256):
                stop = min(start + 256, grid.n_rows)
                if should_stop():
                    return  # nothing is left on disk
                writer.write_block(0, start, mean_of(grid.cell_centres(start, stop)))
                writer.write_block(1, start, variance_of(grid.cell_centres(start, stop)))
            writer.commit()

    Parameters
    ----------
    path : str or os.PathLike
        Destination file; an existing file is replaced on commit.
    grid : GridSpec
        Raster geometry.
    n_bands : int
        Number of bands, 1 to :data:`MAX_BANDS`.
    crs_wkt : str
        CRS of the grid, any form :func:`.crs.to_wkt2` reads; stored as WKT2.
    descriptions : sequence of str, optional
        One description per band.
    metadata : mapping, optional
        Dataset metadata tags; values that are not text are stored as JSON. The tag
        ``fieldcast_version`` is always added.
    """

    def __init__(self, path: str | os.PathLike, grid: GridSpec, n_bands: int, crs_wkt: str,
                 descriptions: Sequence[str] | None = None, metadata: Mapping[str, object] | None = None):
        if not 1 <= n_bands <= MAX_BANDS:
            raise FieldcastError(f"A GeoTIFF holds 1 to {MAX_BANDS:,} bands; {n_bands:,} were asked for. Write "
                                 "fewer bands (fewer realisations) per file.")
        if descriptions is not None and len(descriptions) != n_bands:
            raise FieldcastUsageError(f"{len(descriptions)} descriptions given for {n_bands} bands")
        self.path = os.path.abspath(os.fspath(path))
        self.grid = grid
        self.n_bands = n_bands
        check_destination(self.path)
        wkt2 = to_wkt2(crs_wkt)
        tags = metadata_items(metadata)
        self._temp_path = temporary_path(self.path)
        self._rows_written = np.zeros((n_bands, grid.n_rows), dtype=bool)
        self._dataset = None
        try:
            with gdal_errors(f"create {self.path}"):
                self._dataset = gdal.GetDriverByName("GTiff").Create(
                    self._temp_path, grid.n_cols, grid.n_rows, n_bands, gdal.GDT_Float32, CREATION_OPTIONS)
            if self._dataset is None:
                raise FieldcastError(f"GDAL could not create {self.path}. Choose another output file.")
            with gdal_errors(f"set up {self.path}"):
                self._dataset.SetGeoTransform(grid.geotransform)
                self._dataset.SetProjection(wkt2)
                self._dataset.SetMetadata(tags)
                for index in range(n_bands):
                    band = self._dataset.GetRasterBand(index + 1)
                    band.SetNoDataValue(NODATA)
                    if descriptions is not None:
                        band.SetDescription(descriptions[index])
        except BaseException:
            self.abort()
            raise

    def __enter__(self) -> GeoTiffWriter:
        return self

    @property
    def staged_path(self) -> str:
        """The temporary name the file is written under; after :meth:`commit` inside an
        :class:`.staging.OutputSet` the finished file waits there for the set's commit."""
        return self._temp_path

    def __exit__(self, exc_type, exc_value, traceback) -> None:
        if self._dataset is not None:
            self.abort()

    def write_block(self, band_index: int, row_start: int, array: np.ndarray) -> None:
        """Write rows ``row_start ..`` of band ``band_index`` (0-based).

        ``array`` has shape ``(k, n_cols)``, or ``(k * n_cols,)`` in the raster order of
        :meth:`.GridSpec.cell_centres`. It is converted to Float32 (not modified);
        NaN and infinite values are stored as :data:`NODATA`. Blocks of whole tiles
        (multiples of 256 rows) write fastest.
        """
        if self._dataset is None:
            raise FieldcastUsageError("the writer is closed (committed or aborted)")
        if not 0 <= band_index < self.n_bands:
            raise FieldcastUsageError(f"band_index {band_index} is outside 0..{self.n_bands - 1}")
        with np.errstate(over="ignore"):  # beyond the Float32 range: infinity, stored as nodata below
            values = np.array(array, dtype=np.float32)
        if values.ndim == 1 and values.size % self.grid.n_cols == 0:
            values = values.reshape(-1, self.grid.n_cols)
        if values.ndim != 2 or values.shape[1] != self.grid.n_cols:
            raise FieldcastUsageError(f"expected rows of {self.grid.n_cols} values, got shape {np.shape(array)}")
        row_stop = row_start + values.shape[0]
        if not 0 <= row_start <= row_stop <= self.grid.n_rows:
            raise FieldcastUsageError(f"rows {row_start}..{row_stop - 1} are outside 0..{self.grid.n_rows - 1}")
        values[~np.isfinite(values)] = NODATA
        try:
            with gdal_errors(f"write band {band_index + 1} of {self.path}"):
                self._dataset.GetRasterBand(band_index + 1).WriteArray(values, 0, row_start)
        except BaseException:
            self.abort()
            raise
        self._rows_written[band_index, row_start:row_stop] = True

    def commit(self) -> str:
        """Close the file and move it to :attr:`path` (or register it with the current
        :class:`.staging.OutputSet`, which moves it on its commit); returns the path.

        Raises
        ------
        ValueError
            If some rows of some band were never written (the file is then discarded).
        FieldcastError
            If GDAL cannot finish the file or it cannot be moved into place.
        """
        if self._dataset is None:
            raise FieldcastUsageError("the writer is closed (committed or aborted)")
        missing = np.argwhere(~self._rows_written)
        if len(missing):
            self.abort()
            band, row = missing[0]
            raise FieldcastUsageError(f"{len(missing)} band rows were never written, first band {band} row {row}")
        try:
            with gdal_errors(f"finish {self.path}"):
                self._dataset.FlushCache()
                self._dataset = None  # closing the dataset writes the remaining tiles and header
            place(self._temp_path, self.path, SIDE_SUFFIXES)
        except BaseException:
            self.abort()
            raise
        return self.path

    def abort(self) -> None:
        """Close and delete the temporary file; the destination is left untouched. Safe to repeat."""
        self._dataset = None
        for leftover in (self._temp_path, *(self._temp_path + suffix for suffix in SIDE_SUFFIXES)):
            with contextlib.suppress(FileNotFoundError):
                os.remove(leftover)


def write_geotiff(path: str | os.PathLike, grid: GridSpec, bands: Sequence[np.ndarray] | np.ndarray,
                  crs_wkt: str, descriptions: Sequence[str] | None = None,
                  metadata: Mapping[str, object] | None = None) -> str:
    """Write whole bands, each ``(n_rows, n_cols)`` (or flat in cell order), as one GeoTIFF.

    See :class:`GeoTiffWriter` for the format and parameters. Returns the absolute path.
    """
    with GeoTiffWriter(path, grid, len(bands), crs_wkt, descriptions, metadata) as writer:
        for index, band in enumerate(bands):
            writer.write_block(index, 0, band)
        return writer.commit()
