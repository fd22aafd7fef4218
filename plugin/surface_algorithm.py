"""What the kriging-surface algorithms (predict, predictmany) share: map area, local neighbourhood, writing.

:class:`SurfaceAlgorithm` adds to :class:`.raster_algorithm.RasterAlgorithm` the
MAP_AREA parameters, the choice (from NEIGHBOURS and SEARCH_RADIUS) between
global kriging (:class:`KrigingPredictor`, every sample) and local kriging
(:class:`LocalKrigingPredictor`, the nearest samples of each cell), and the
kriging of a grid into GeoTIFF files with its log lines (:func:`log_gap` and
:func:`log_unresolved` serve predictpoints too).
"""
from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence

import numpy as np
from qgis.core import QgsProcessingParameterNumber

from ..algorithms import (
    CHECK_SAMPLE_LIMIT,
    CONDITION_ADVICE,
    ExtrapolationCheck,
    FieldcastError,
    FieldcastUsageError,
    FieldRasters,
    GridSpec,
    ImputedKriging,
    LocalKrigingPredictor,
    ModelDocument,
    Neighbourhood,
    SurfaceScale,
    cell_predictor,
    choose_predictor,
    grid_targets,
    hull_map_area,
    neighbourhood_gap,
    write_surfaces,
)
from .algorithm_base import advanced, log_spread, push_log
from .raster_algorithm import RasterAlgorithm

MAP_AREAS = ("hull", "extent")
"""MAP_AREA choices: the samples' convex hull grown by HULL_MARGIN, or the whole extent."""
GAP_WARNING = 0.01
"""Departure of local from global kriging above which the log warns (fraction of the standard deviation for
the prediction, of the sill for the variance)."""


def log_gap(predictor: LocalKrigingPredictor, xy: np.ndarray, values: np.ndarray, targets: np.ndarray, feedback,
            places: str = "cells") -> None:
    """Say how far local kriging departs from kriging with all samples at a few ``targets`` (called ``places``
    in the log), with advice above 1 %.

    Done for up to :data:`..algorithms.predict.neighbourhood_check.CHECK_SAMPLE_LIMIT` samples (the comparison
    factorises the full system); with several fields, for the first. The check is a diagnostic: a
    problem in it is logged, never fatal.
    """
    if len(xy) > CHECK_SAMPLE_LIMIT or feedback.isCanceled():
        return
    try:
        gap = neighbourhood_gap(predictor, xy, values, targets)
    except FieldcastUsageError:
        raise  # a programming error: processAlgorithm reports it as an internal error
    except FieldcastError as exc:
        feedback.pushInfo(f"Neighbourhood check skipped: {exc}")
        return
    if not gap.targets:
        return
    words = (f"Neighbourhood check: at {gap.targets} {places} drawn at random, local kriging differs from kriging "
             f"with all {len(xy)} samples by up to {gap.prediction:.1%} of the field's standard deviation "
             f"(square root of the sill) in the prediction and {gap.variance:.1%} of the sill in the variance "
             "(modelling scale).")
    if max(gap.prediction, gap.variance) > GAP_WARNING:
        feedback.pushWarning(words + " More neighbours, or NEIGHBOURS = 0 (all samples), bring it closer. Local "
                             "kriging estimates the mean from each cell's neighbours (a constant mean, or LOCAL_MEAN), "
                             "which shows most at cells beyond the model's range from their samples; a spherical "
                             "shape, a large nugget "
                             "share or a long range also let samples outside the neighbourhood matter.")
    else:
        feedback.pushInfo(words)

def log_unresolved(unresolved: int, singular: int, ill_conditioned: int, feedback, places: str = "cell(s)",
                   missing: str = "are nodata") -> None:
    """Say how many ``places`` were left without a value, how many of them for a singular neighbour system, and
    how many were kriged from an ill-conditioned one (nothing when there are none); ``missing`` says how they
    are left ("are nodata" in a raster)."""
    if unresolved > singular:
        feedback.pushWarning(f"{unresolved - singular:,} {places} {missing}: fewer samples than the mean model "
                             "needs lie within SEARCH_RADIUS of them. Enlarge SEARCH_RADIUS, or leave it empty, "
                             "to fill them.")
    if singular:
        feedback.pushWarning(f"{singular:,} {places} {missing}: the covariance matrix of their neighbours is "
                             "numerically singular. " + CONDITION_ADVICE)
    if ill_conditioned:
        feedback.pushWarning(f"{ill_conditioned:,} {places} were kriged from an ill-conditioned neighbour system "
                             "(condition number above the warning level), so their predictions can stray far "
                             "from the data. " + CONDITION_ADVICE)


class SurfaceAlgorithm(RasterAlgorithm):
    """Base of the algorithms that krige prediction and variance rasters."""

    MAP_AREA = "MAP_AREA"
    HULL_MARGIN = "HULL_MARGIN"

    def add_map_area_parameters(self) -> None:
        """MAP_AREA: hull (default; the samples' convex hull grown by HULL_MARGIN) or extent (every cell)."""
        self.add_choice(self.MAP_AREA, self.tr("Map area (hull = near the samples, extent = every cell)"),
                        MAP_AREAS, "hull")
        self.addParameter(advanced(QgsProcessingParameterNumber(
            self.HULL_MARGIN, self.tr("Hull margin (working CRS units; empty = median sample spacing)"),
            type=QgsProcessingParameterNumber.Double, optional=True, minValue=0.0)))

    def grid_and_mask(self, parameters, context, xy: np.ndarray, crs_wkt: str, units: str, feedback,
                      n_bands: int) -> tuple[GridSpec, np.ndarray | None]:
        """The grid and cell mask of :class:`.raster_algorithm.RasterAlgorithm`, limited by MAP_AREA, logged."""
        grid, inside = super().grid_and_mask(parameters, context, xy, crs_wkt, units, feedback, n_bands)
        margin = self.optional_number(parameters, self.HULL_MARGIN, context)
        if self.choice(parameters, self.MAP_AREA, context) == "extent":
            if margin is not None:
                feedback.pushWarning("HULL_MARGIN is ignored: MAP_AREA is extent, so every cell is mapped.")
            return grid, inside
        limited, line = hull_map_area(grid, xy, margin, units, inside)
        feedback.pushInfo(line)
        return grid, limited

    def cell_covariates(self, parameters, context, document: ModelDocument,
                        grid: GridSpec) -> Callable[[int, int], np.ndarray] | None:
        """``rows(start, stop)``: the model's covariate columns at the cells of those rows of ``grid`` from the
        COVARIATES and CLASS_COVARIATES rasters (the model's, see ``model_covariates``); None without them."""
        sources = self.covariate_sources(parameters, context)
        if not sources:
            return None

        def rows(start: int, stop: int) -> np.ndarray:
            return document.covariates.at_rows(sources, grid, start, stop, document.crs_wkt)
        return rows

    @staticmethod
    def krige_surface(documents: Sequence[ModelDocument], xy: np.ndarray, values: np.ndarray, grid: GridSpec,
                      inside: np.ndarray | None, scale: SurfaceScale, neighbourhood: Neighbourhood,
                      outputs: Sequence[tuple[str, Mapping[str, str]]], feedback,
                      progress: Callable[[float], None], sample_covariates: np.ndarray | None = None,
                      cell_covariates: Callable[[int, int], np.ndarray] | None = None,
                      error_variance: np.ndarray | None = None, sets: np.ndarray | None = None) -> None:
        """Krige every cell of ``grid`` and write the rasters of ``outputs`` (see :func:`.surface.write_surfaces`).

        One field: ``values`` (n,), one document and one ``(field name, paths)`` output. Several fields
        sampled at the same places and sharing one correlation model: ``values`` (n, k), and per field
        its document (the shared model at the field's scale) and its output; one predictor krigs them all.
        A ``"distance"`` path of the first output receives the distance to the nearest sample. The
        extrapolation counts (:class:`ExtrapolationCheck`) go to the log. With covariates, ``sample_covariates``
        are their design columns at the samples and ``cell_covariates(row_start, row_stop)`` at the cells of
        those rows; ``error_variance`` the samples' measurement-error variances (ERROR_VARIANCE_FIELD). ``sets``
        are the completed data sets (m, n) of samples below a limit, whose mean ``values`` is: global point kriging
        krigs each and combines them (Rubin's rules), the log says when it cannot.

        Raises
        ------
        Cancelled
            When the feedback is cancelled; no file of ``outputs`` is left.
        """
        document = documents[0]
        predictor, lines = choose_predictor(xy, values, document.covariance, document.mean, neighbourhood,
                                            support=scale.support, units=document.units, covariates=sample_covariates,
                                            error_variance=error_variance)
        push_log(feedback, lines)
        if sets is not None:
            combined = scale.support == "point" and not isinstance(predictor, LocalKrigingPredictor)
            log_spread(feedback, combined, "" if combined else "With local kriging or cell support: ")
            if combined:
                predictor = ImputedKriging(xy, sets, document.covariance, document.mean, sample_covariates)
        settings = {"fieldcast_support": scale.support}
        if document.transform.kind != "none":  # a back-transform applies to a transformed model only
            settings["fieldcast_backtransform"] = scale.backtransform
        if isinstance(predictor, LocalKrigingPredictor):
            settings["fieldcast_neighbours"] = predictor.neighbours
            if neighbourhood.search_radius is not None:
                settings["fieldcast_search_radius"] = neighbourhood.search_radius
            settings["fieldcast_global_trend"] = "no" if predictor.trend is None else "yes"
            if sample_covariates is None:
                log_gap(predictor, xy, values, grid_targets(grid, inside), feedback)
            else:
                feedback.pushInfo("Neighbourhood check skipped: it compares at random cells without covariates.")
        if scale.threshold is not None:
            settings["fieldcast_threshold"] = scale.threshold
        if scale.measurement_variance is not None:
            settings["fieldcast_measurement_variance"] = scale.measurement_variance
        if any(paths.get("lower") or paths.get("upper") for _, paths in outputs):
            settings["fieldcast_interval_probability"] = scale.interval
        rasters = [FieldRasters(field, paths, {"fieldcast_model": document.to_dict(), **settings},
                                document.covariance.sill / documents[0].covariance.sill)
                   for document, (field, paths) in zip(documents, outputs)]
        local = isinstance(predictor, LocalKrigingPredictor)
        before = (predictor.singular_targets, predictor.ill_conditioned_targets) if local else (0, 0)
        check = ExtrapolationCheck.for_samples(xy, values, document.covariance, document.mean, scale.transform,
                                               [field for field, _ in outputs],
                                               [raster.variance_factor for raster in rasters], sample_covariates)
        counts = write_surfaces(cell_predictor(predictor, scale.support, grid.pixel_size, scale.transform), grid,
                                inside, scale, documents[0].crs_wkt, rasters, progress, feedback.isCanceled, check,
                                outputs[0][1].get("distance", ""), cell_covariates)
        after = (predictor.singular_targets, predictor.ill_conditioned_targets) if local else (0, 0)
        log_unresolved(counts.unresolved, after[0] - before[0], after[1] - before[1], feedback)
        for warning in counts.warnings():
            feedback.pushWarning(warning)
        push_log(feedback, check.lines(document.units))
