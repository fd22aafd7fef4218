"""Kriging a grid in row blocks and writing the prediction (and variance) GeoTIFFs.

Memory stays bounded by one block of rows at a time; the files appear only
when every block is written (see :class:`..algorithms.geotiff.GeoTiffWriter`).
"""
from __future__ import annotations

import contextlib
from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np

from ..algorithms.errors import Cancelled
from ..algorithms.geotiff import GeoTiffWriter
from ..algorithms.grid import GridSpec
from ..algorithms.kriging import KrigingPredictor
from ..algorithms.transform import Transform

BACKTRANSFORMS = ("median", "mean")
BLOCK_CELLS = 1 << 20
"""Most cells predicted per block of rows (about 50 MB of working arrays with a few hundred samples)."""
TILE_ROWS = 256


@dataclass(frozen=True)
class SurfaceScale:
    """How modelling-scale kriging results become output numbers.

    Attributes
    ----------
    transform : Transform
        Transform of the model.
    backtransform : str
        ``"median"`` (``exp(mu) - offset``) or ``"mean"`` (``exp(mu + s2/2) - offset``) for a log model.
    """

    transform: Transform
    backtransform: str = "median"

    def values(self, mean: np.ndarray, variance: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Prediction and variance in attribute units (squared for the variance)."""
        if self.backtransform == "mean":
            prediction = self.transform.back_mean(mean, variance)
        else:
            prediction = self.transform.back_median(mean)
        return prediction, self.transform.back_variance(mean, variance)

    def descriptions(self, field: str) -> tuple[str, str]:
        """Band descriptions of the prediction and variance rasters."""
        if self.transform.kind == "none":
            return (f"prediction of {field} (attribute units; kriging prediction)",
                    f"variance of {field} (attribute units squared; kriging error variance, nugget excluded)")
        offset = self.transform.offset
        formula = "exp(mu) - offset" if self.backtransform == "median" else "exp(mu + s2/2) - offset"
        return (f"prediction of {field} (attribute units; log model back-transformed to the {self.backtransform}: "
                f"{formula}, offset {offset:g})",
                f"variance of {field} (attribute units squared; lognormal: exp(2 mu + s2) (exp(s2) - 1), "
                "nugget excluded)")


def block_rows(grid: GridSpec) -> int:
    """Rows per block: whole tiles of 256 rows when they hold at most :data:`BLOCK_CELLS` cells."""
    rows = max(1, BLOCK_CELLS // grid.n_cols)
    return TILE_ROWS * (rows // TILE_ROWS) if rows >= TILE_ROWS else rows


def write_surface(predictor: KrigingPredictor, grid: GridSpec, inside: np.ndarray | None, scale: SurfaceScale,
                  field: str, crs_wkt: str, prediction_path: str, variance_path: str | None,
                  metadata: Mapping[str, object], progress: Callable[[float], None] | None = None,
                  should_stop: Callable[[], bool] | None = None) -> None:
    """Predict every cell centre (those with ``inside`` True) and write the GeoTIFF(s).

    Cells outside the mask, and values that do not fit Float32, are stored as nodata.

    Raises
    ------
    Cancelled
        When ``should_stop()`` turns True; no output file is left.
    """
    descriptions = scale.descriptions(field)
    paths = [prediction_path] + ([variance_path] if variance_path else [])
    step = block_rows(grid)
    with contextlib.ExitStack() as stack:
        writers = [stack.enter_context(GeoTiffWriter(path, grid, 1, crs_wkt, [description], metadata))
                   for path, description in zip(paths, descriptions)]
        for start in range(0, grid.n_rows, step):
            if should_stop is not None and should_stop():
                raise Cancelled("Prediction was cancelled.")
            stop = min(start + step, grid.n_rows)
            centres = grid.cell_centres(start, stop)
            keep = np.ones(len(centres), bool) if inside is None else inside[start:stop].ravel()
            bands = [np.full(len(centres), np.nan), np.full(len(centres), np.nan)]
            if keep.any():
                def block_progress(fraction: float, start: int = start, stop: int = stop) -> None:
                    if progress is not None:
                        progress((start + fraction * (stop - start)) / grid.n_rows)

                mean, variance = predictor.predict(centres[keep], progress=block_progress, should_stop=should_stop)
                bands[0][keep], bands[1][keep] = scale.values(mean, variance)
            for writer, band in zip(writers, bands):
                writer.write_block(0, start, band)
            if progress is not None:
                progress(stop / grid.n_rows)
        for writer in writers:
            writer.commit()
