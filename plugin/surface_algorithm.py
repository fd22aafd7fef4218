"""What the kriging-surface algorithms (predict, predictmany) share: back-transform, local neighbourhood, writing.

:class:`SurfaceAlgorithm` adds to :class:`.raster_algorithm.RasterAlgorithm` the
BACKTRANSFORM parameter, the choice (from NEIGHBOURS and SEARCH_RADIUS) between
global kriging (:class:`KrigingPredictor`, every sample) and local kriging
(:class:`LocalKrigingPredictor`, the nearest samples of each cell), and the
kriging of a grid into GeoTIFF files with its log lines.
"""
from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence

import numpy as np

from ..algorithms import (
    BACKTRANSFORMS,
    CHECK_SAMPLE_LIMIT,
    CONDITION_ADVICE,
    FieldcastError,
    FieldRasters,
    GridSpec,
    LocalKrigingPredictor,
    ModelDocument,
    Neighbourhood,
    SurfaceScale,
    cell_predictor,
    choose_predictor,
    grid_targets,
    neighbourhood_gap,
    write_surfaces,
)
from .algorithm_base import push_log
from .raster_algorithm import RasterAlgorithm

GAP_WARNING = 0.01
"""Departure of local from global kriging above which the log warns (fraction of the standard deviation for
the prediction, of the sill for the variance)."""


def log_gap(predictor: LocalKrigingPredictor, xy: np.ndarray, values: np.ndarray, grid: GridSpec,
            inside: np.ndarray | None, feedback) -> None:
    """Say how far local kriging departs from kriging with all samples at a few cells, with advice above 1 %.

    Done for up to :data:`..algorithms.predict.neighbourhood_check.CHECK_SAMPLE_LIMIT` samples (the comparison
    factorises the full system); with several fields, for the first. The check is a diagnostic: a
    problem in it is logged, never fatal.
    """
    if len(xy) > CHECK_SAMPLE_LIMIT or feedback.isCanceled():
        return
    try:
        gap = neighbourhood_gap(predictor, xy, values, grid_targets(grid, inside))
    except FieldcastError as exc:
        feedback.pushInfo(f"Neighbourhood check skipped: {exc}")
        return
    if not gap.targets:
        return
    words = (f"Neighbourhood check: at {gap.targets} cells drawn at random, local kriging differs from kriging "
             f"with all {len(xy)} samples by up to {gap.prediction:.1%} of the field's standard deviation "
             f"(square root of the sill) in the prediction and {gap.variance:.1%} of the sill in the variance "
             "(modelling scale).")
    if max(gap.prediction, gap.variance) > GAP_WARNING:
        feedback.pushWarning(words + " More neighbours, or NEIGHBOURS = 0 (all samples), bring it closer. Local "
                             "kriging estimates the mean from each cell's neighbours, which shows most at cells "
                             "beyond the model's range from their samples; a spherical shape, a large nugget "
                             "share or a long range also let samples outside the neighbourhood matter.")
    else:
        feedback.pushInfo(words)

def log_unresolved(unresolved: int, singular: int, ill_conditioned: int, feedback) -> None:
    """Say how many cells were left nodata, how many of them for a singular neighbour system, and how many
    were kriged from an ill-conditioned one (nothing when there are none)."""
    if unresolved > singular:
        feedback.pushWarning(f"{unresolved - singular:,} cell(s) are nodata: fewer samples than the mean model "
                             "needs lie within SEARCH_RADIUS of them. Enlarge SEARCH_RADIUS, or leave it empty, "
                             "to fill them.")
    if singular:
        feedback.pushWarning(f"{singular:,} cell(s) are nodata: the covariance matrix of their neighbours is "
                             "numerically singular. " + CONDITION_ADVICE)
    if ill_conditioned:
        feedback.pushWarning(f"{ill_conditioned:,} cell(s) were kriged from an ill-conditioned neighbour system "
                             "(condition number above the warning level), so their predictions can stray far "
                             "from the data. " + CONDITION_ADVICE)


class SurfaceAlgorithm(RasterAlgorithm):
    """Base of the algorithms that krige prediction and variance rasters."""

    BACKTRANSFORM = "BACKTRANSFORM"

    def add_backtransform_parameter(self) -> None:
        """BACKTRANSFORM: median (default) or mean, for log models."""
        self.add_choice(self.BACKTRANSFORM, self.tr("Back-transform (log models)"), BACKTRANSFORMS, "median")

    @staticmethod
    def krige_surface(documents: Sequence[ModelDocument], xy: np.ndarray, values: np.ndarray, grid: GridSpec,
                      inside: np.ndarray | None, scale: SurfaceScale, neighbourhood: Neighbourhood,
                      outputs: Sequence[tuple[str, Mapping[str, str]]], feedback,
                      progress: Callable[[float], None]) -> None:
        """Krige every cell of ``grid`` and write the rasters of ``outputs`` (see :func:`.surface.write_surfaces`).

        One field: ``values`` (n,), one document and one ``(field name, paths)`` output. Several fields
        sampled at the same places and sharing one correlation model: ``values`` (n, k), and per field
        its document (the shared model at the field's scale) and its output; one predictor krigs them all.

        Raises
        ------
        Cancelled
            When the feedback is cancelled; no file of ``outputs`` is left.
        """
        document = documents[0]
        predictor, lines = choose_predictor(xy, values, document.covariance, document.mean, neighbourhood,
                                            support=scale.support, units=document.units)
        push_log(feedback, lines)
        settings = {"fieldcast_support": scale.support}
        if document.transform.kind != "none":  # a back-transform applies to a transformed model only
            settings["fieldcast_backtransform"] = scale.backtransform
        if isinstance(predictor, LocalKrigingPredictor):
            settings["fieldcast_neighbours"] = predictor.neighbours
            if neighbourhood.search_radius is not None:
                settings["fieldcast_search_radius"] = neighbourhood.search_radius
            log_gap(predictor, xy, values, grid, inside, feedback)
        if scale.threshold is not None:
            settings["fieldcast_threshold"] = scale.threshold
        rasters = [FieldRasters(field, paths, {"fieldcast_model": document.to_dict(), **settings},
                                document.covariance.sill / documents[0].covariance.sill)
                   for document, (field, paths) in zip(documents, outputs)]
        local = isinstance(predictor, LocalKrigingPredictor)
        before = (predictor.singular_targets, predictor.ill_conditioned_targets) if local else (0, 0)
        unresolved = write_surfaces(cell_predictor(predictor, scale.support, grid.pixel_size), grid, inside, scale,
                                    documents[0].crs_wkt, rasters, progress, feedback.isCanceled)
        after = (predictor.singular_targets, predictor.ill_conditioned_targets) if local else (0, 0)
        log_unresolved(unresolved, after[0] - before[0], after[1] - before[1], feedback)
