"""Running a prepared grid job in this process: the engine's own writer, block after block."""
from __future__ import annotations

from collections.abc import Callable

from ..io.nodata_counts import NodataCounts
from ..predict.grid_surfaces import write_surfaces
from .job import GridRun, singular_targets


def run_in_process(run: GridRun, progress: Callable[[float], None] | None = None,
             should_stop: Callable[[], bool] | None = None) -> NodataCounts:
    """Krige and write the rasters of ``run`` in this process (:func:`..predict.grid_surfaces.write_surfaces`).

    Returns the nodata counts; ``run.check`` holds the extrapolation counts afterwards and ``run.singular`` the
    cells left nodata for a singular neighbour system.

    Raises
    ------
    Cancelled
        When ``should_stop()`` turns true; no output file is left.
    """
    counts = write_surfaces(run.cell_predictor(), run.grid, run.inside, run.scale, run.crs_wkt, run.fields,
                            progress, should_stop, run.check, run.distance_path)
    run.singular = singular_targets(run.predictor)
    return counts
