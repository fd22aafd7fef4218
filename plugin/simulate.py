"""Toolbox algorithm 'Simulate conditional fields' (fieldcast:simulate)."""
from __future__ import annotations

import contextlib

import numpy as np
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsFeature,
    QgsField,
    QgsFields,
    QgsProcessing,
    QgsProcessingOutputNumber,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterDestination,
    QgsWkbTypes,
)

from ..algorithms import (
    MAX_BANDS,
    Cancelled,
    CellCovariates,
    FieldcastError,
    GeoTiffWriter,
    GridSpec,
    ModelDocument,
    NodataCounts,
    RealisationSummary,
    SimulationResult,
    area_words,
    covariate_extrapolation,
    polygon_areas_above,
    refuse_local_covariates,
    search_words,
    simulate_conditional,
    summarise_realisations,
)
from .algorithm_base import advanced, progress_callback, push_log
from .field_types import field_type
from .help_text import (
    COVARIATE_HELP,
    ERROR_VARIANCE_HELP,
    GRID_HELP,
    LOCAL_MEAN_HELP,
    MODEL_FILE_HELP,
    NONDETECT_HELP,
    NUGGET_HELP,
    RASTER_TARGET_CRS_HELP,
    THRESHOLD_HELP,
    compose_help,
)
from .layer_style import style_on_load
from .polygon_reader import working_polygons
from .raster_algorithm import RasterAlgorithm
from .sinks import checked_sink
from .whole_numbers import whole_number

SUMMARY_RASTERS = (
    ("OUTPUT_MEAN", "Mean of the realisations", "mean"),
    ("OUTPUT_STDDEV", "Standard deviation of the realisations", "std"),
    ("OUTPUT_P10", "10th percentile of the realisations", "p10"),
    ("OUTPUT_P90", "90th percentile of the realisations", "p90"),
)
"""Summary rasters: parameter name, description, attribute of :class:`RealisationSummary`."""

AREA_OUTPUTS = (
    ("AREA_P10", "Area above the threshold, 10th percentile over realisations (CRS units squared)", 10),
    ("AREA_P50", "Area above the threshold, median over realisations (CRS units squared)", 50),
    ("AREA_P90", "Area above the threshold, 90th percentile over realisations (CRS units squared)", 90),
)

SIMULATION_PERCENT = (5.0, 90.0)
"""Share of the progress bar (percent) taken by the realisations; writing the files fills the rest."""


class SimulateAlgorithm(RasterAlgorithm):
    """Draw conditional realisations of the field on a grid and summarise them."""

    REALIZATIONS = "REALIZATIONS"
    AREAS = "AREAS"
    DEPTH = "DEPTH"
    OUTPUT_AREAS = "OUTPUT_AREAS"
    SEED = "SEED"
    OUTPUT = "OUTPUT"
    OUTPUT_TABLE = "OUTPUT_TABLE"
    ICON = "simulate.svg"

    NAME = "simulate"
    DISPLAY_NAME = "Simulate conditional fields"
    HELP = compose_help(
        "Draws equally plausible fields under the model that all honour the samples (conditional simulation: "
        "circulant embedding, conditioned by kriging). One realisation looks like the real field, rough where it "
        "is rough, unlike the smooth kriging map; the spread over many realisations shows the uncertainty of "
        "areas and totals, such as the area above a limit, which a per-cell variance map cannot give.",
        [("Sample points / Value field", "The samples to condition on (NULL values skipped, samples at one "
          "location averaged)."),
         MODEL_FILE_HELP,
         *COVARIATE_HELP,
         *NONDETECT_HELP,
         *GRID_HELP,
         ("Number of realisations", "How many fields to draw (default 100, at most 65,535: the bands of one "
          "GeoTIFF). Shares and percentiles from 100 realisations are good to a few per cent; more give steadier "
          "summaries, at the cost of time and memory (8 bytes per cell and realisation)."),
         ("Random seed", "Seed of the random numbers, any whole number from 0: the same seed, data and settings "
          "give the same fields."),
         ("Neighbours per cell", "0 (the default): every sample conditions every cell (global kriging weights). "
          "A number k: each cell is conditioned on its k nearest samples (local kriging weights; 16 to 64 is "
          "common practice; nearby cells share one search where it holds each cell's own 4 nearest), faster "
          "for many samples; the realisations then have the local kriging mean and "
          "variance. A linear, quadratic or covariate trend is estimated once from all samples and each "
          "realisation adds it with its coefficients drawn from their estimation uncertainty (unless the mean is "
          "re-estimated in each neighbourhood). It must be more than the number of trend terms (at least 2 for a "
          "constant mean)."),
         ("Search radius", "With neighbours only: samples farther than this (working CRS units, along the major "
          "axis; the search ellipse follows the model's anisotropy) are left out. Cells with too few samples in "
          "range are nodata in every realisation and left out of the summaries, areas and means; the log says "
          "how many. Empty: no limit."),
         LOCAL_MEAN_HELP,
         NUGGET_HELP,
         ERROR_VARIANCE_HELP,
         THRESHOLD_HELP,
         ("Polygons for areas", "Optional polygon layer (AREAS: remediation units, parcels, fields; any CRS): with a "
          "threshold, the area of each polygon above it in every realisation goes to the polygon area table. A "
          "cell counts for a polygon when its centre lies inside it (holes left out, every part counted)."),
         ("Depth for volumes", "Optional depth or thickness of every polygon (DEPTH): the table then also gives "
          "the volume above the threshold (area times depth)."),
         RASTER_TARGET_CRS_HELP],
        [("Realisations", "Multiband Float32 GeoTIFF, one band per realisation, in attribute units (a log model "
          "is simulated in the log scale and back-transformed cell by cell)."),
         ("Mean / Standard deviation / 10th percentile / 90th percentile",
          "Optional rasters over the realisations, attribute units: the mean (close to the kriging "
          "mean-back-transformed map), the spread, and the 10th and 90th percentiles per cell."),
         ("Exceedance share", "Optional raster, 0 to 1: the share of realisations above the threshold per cell, "
          "a Monte Carlo estimate of the exceedance probability under the model (not a certainty)."),
         ("Realisation table", "One row per realisation (no geometry): its number, the area of the masked cells "
          "above the threshold (CRS units squared, e.g. m2; empty without a threshold) and the mean over the "
          "masked cells (attribute units). The spread of the area over the rows is the uncertainty of the area "
          "to act on."),
         ("AREA_P10 / AREA_P50 / AREA_P90", "Percentiles of that area over the realisations (with a threshold); "
          "the log states them too."),
         ("Polygon area table", "With AREAS: one row per polygon and realisation (no geometry): the polygon's "
          "feature id, the realisation's number, the polygon's area above the threshold (CRS units squared) and, "
          "with DEPTH, the volume above it. The spread over a polygon's rows is the uncertainty of its area to "
          "act on; it is only as good as the model behind it, and access, safety and regulation come first.")],
    )

    def initAlgorithm(self, config=None):
        self.add_sample_parameters()
        self.add_model_parameter()
        self.add_covariate_parameters()
        self.add_nondetect_parameters()
        self.add_grid_parameters()
        self.addParameter(QgsProcessingParameterNumber(
            self.REALIZATIONS, self.tr("Number of realisations"), type=QgsProcessingParameterNumber.Integer,
            defaultValue=100, minValue=1, maxValue=MAX_BANDS))
        self.addParameter(advanced(QgsProcessingParameterNumber(
            self.SEED, self.tr("Random seed"), type=QgsProcessingParameterNumber.Integer, defaultValue=1,
            minValue=0)))
        self.add_neighbourhood_parameters(per="cell")
        self.add_measurement_parameters()
        self.add_threshold_parameter()
        self.add_target_crs_parameter()
        self.addParameter(QgsProcessingParameterRasterDestination(self.OUTPUT, self.tr("Realisations")))
        for name, description, _ in SUMMARY_RASTERS[:2]:
            self.addParameter(QgsProcessingParameterRasterDestination(
                name, self.tr(description), optional=True, createByDefault=False))
        self.addParameter(QgsProcessingParameterRasterDestination(
            self.OUTPUT_EXCEEDANCE, self.tr("Exceedance share"), optional=True, createByDefault=False))
        for name, description, _ in SUMMARY_RASTERS[2:]:
            self.addParameter(QgsProcessingParameterRasterDestination(
                name, self.tr(description), optional=True, createByDefault=False))
        self.addParameter(QgsProcessingParameterFeatureSink(
            self.OUTPUT_TABLE, self.tr("Realisation table"), QgsProcessing.TypeVector, optional=True,
            createByDefault=True))
        for name, description, _ in AREA_OUTPUTS:
            self.addOutput(QgsProcessingOutputNumber(name, self.tr(description)))
        self.addParameter(advanced(QgsProcessingParameterFeatureSource(
            self.AREAS, self.tr("Polygons for areas"), [QgsProcessing.TypeVectorPolygon], optional=True)))
        self.addParameter(advanced(QgsProcessingParameterNumber(
            self.DEPTH, self.tr("Depth for volumes"), type=QgsProcessingParameterNumber.Double, optional=True,
            minValue=0.0)))
        self.addParameter(QgsProcessingParameterFeatureSink(
            self.OUTPUT_AREAS, self.tr("Polygon area table"), QgsProcessing.TypeVector, optional=True,
            createByDefault=False))

    def checkParameterValues(self, parameters, context):
        """Refuse REALIZATIONS and SEED outside their ranges with our advice (before Processing's generic message)."""
        try:
            self.realisations_and_seed(parameters)
        except FieldcastError as exc:
            return False, str(exc)
        return super().checkParameterValues(parameters, context)

    def realisations_and_seed(self, parameters) -> tuple[int, int]:
        """REALIZATIONS (1 to :data:`MAX_BANDS`, the bands of one GeoTIFF) and SEED (any whole number from 0),
        read exactly (Processing's integer reading wraps numbers from 2**31 on)."""
        count = whole_number(self.given_value(parameters, self.REALIZATIONS), "REALIZATIONS (number of realisations)",
                             1, MAX_BANDS)
        seed = whole_number(self.given_value(parameters, self.SEED), "SEED (random seed)", 0)
        return count, seed

    def compute(self, parameters, context, feedback) -> dict:
        count, seed = self.realisations_and_seed(parameters)
        exceedance_path, threshold = self.exceedance_destination(parameters, context)
        paths = {name: self.raster_destination(parameters, name, context)
                 for name in (self.OUTPUT, *(name for name, _, _ in SUMMARY_RASTERS))}
        paths[self.OUTPUT_EXCEEDANCE] = exceedance_path
        wants_table = parameters.get(self.OUTPUT_TABLE) not in (None, "")
        summaries = [name for name, path in paths.items() if path and name != self.OUTPUT]
        if count < 2 and (summaries or wants_table):
            raise FieldcastError(f"Summaries and the realisation table need at least 2 realisations; got {count}. "
                                 "Ask for more realisations (100 is a good start), or only for the realisations.")
        areas_source = self.polygon_source(parameters, context, threshold)
        document, samples = self.model_and_samples(parameters, context, feedback,
                                                   progress_callback(feedback, 0, SIMULATION_PERCENT[0]), True)
        if samples.sets is not None:
            feedback.pushInfo(f"Each realisation is conditioned on one of the {len(samples.sets)} completed data sets "
                              "of the samples below a limit (realisation r on set r modulo their number).")
        neighbourhood = self.neighbourhood(parameters, context)
        neighbours, lines = neighbourhood.resolved(document.mean, "cell")
        refuse_local_covariates(document.mean, neighbours, len(samples.values), local_mean=neighbourhood.local_mean)
        search_radius = neighbourhood.search_radius
        grid, inside = self.grid_and_mask(parameters, context, samples.xy, document.crs_wkt, document.units,
                                          feedback, n_bands=1 + len(summaries))  # realisations: checked below
        grid_covariates, inside = self.grid_covariates(parameters, context, document, grid, inside, feedback)
        if grid_covariates is not None:
            cells = grid_covariates if inside is None else grid_covariates[inside.ravel()]
            push_log(feedback, covariate_extrapolation(samples.covariates, cells))
        feedback.pushInfo(f"Simulating {count} realisations (seed {seed}).")
        push_log(feedback, lines)
        self.log_conditioning(neighbours, search_radius, len(samples.values), document.units, feedback)
        # The engine estimates the memory of the realisations before any work and refuses with advice.
        result = simulate_conditional(samples.xy, samples.values, document.covariance, document.mean, grid,
                                      n_realisations=count, seed=seed, transform=document.transform,
                                      covariates=samples.covariates, grid_covariates=grid_covariates,
                                      neighbours=neighbours, search_radius=search_radius,
                                      local_mean=neighbourhood.local_mean,
                                      error_variance=samples.error_variance, value_sets=samples.sets,
                                      progress=progress_callback(feedback, *SIMULATION_PERCENT),
                                      should_stop=feedback.isCanceled)
        self.log_method(result, feedback)
        self.log_unresolved(result, inside, feedback)
        summary = None
        if count >= 2 and (summaries or wants_table or threshold is not None):
            summary = summarise_realisations(result.realisations, grid.pixel_size ** 2, threshold=threshold,
                                             mask=inside)
        if feedback.isCanceled():
            raise Cancelled("Simulation was cancelled.")
        metadata = {"fieldcast_model": document.to_dict(), "fieldcast_seed": seed,
                    "fieldcast_realisations": count, "fieldcast_simulation": result.method}
        self.check_nodata(result, summary, inside, paths, samples.field, feedback)
        self.write_rasters(result, summary, inside, paths, threshold, samples.field, document.crs_wkt, metadata)
        outputs = {name: path for name, path in paths.items() if path}
        looks = {self.OUTPUT: "realisations", self.OUTPUT_EXCEEDANCE: "share_above",
                 **{name: attribute for name, _, attribute in SUMMARY_RASTERS}}
        for name, path in outputs.items():
            style_on_load(context, path, samples.field, looks[name], threshold=threshold)
        if wants_table:
            outputs[self.OUTPUT_TABLE] = self.write_table(parameters, context, summary)
        if areas_source is not None:
            outputs[self.OUTPUT_AREAS] = self.write_polygon_areas(parameters, context, areas_source, result, grid,
                                                                  threshold, inside, document.crs_wkt)
        if summary is not None and summary.area_above is not None:
            areas = summary.area_percentiles([percent for _, _, percent in AREA_OUTPUTS])
            outputs.update({name: float(area) for (name, _, _), area in zip(AREA_OUTPUTS, areas)})
            feedback.pushInfo(
                f"Area of the masked cells above {threshold:g}: P10 {area_words(areas[0], document.units)}, P50 "
                f"{area_words(areas[1], document.units)}, P90 {area_words(areas[2], document.units)}, of "
                f"{area_words(summary.mask_area, document.units)} in all, over {count} realisations.")
        feedback.setProgress(100.0)
        return outputs

    def grid_covariates(self, parameters, context, document: ModelDocument, grid: GridSpec,
                        inside: np.ndarray | None, feedback) -> tuple[np.ndarray | None, np.ndarray | None]:
        """The model's covariate columns at every cell (raster order) and the cell mask without the cells where a
        covariate has no value (counted in the log); (None, ``inside``) without covariates.

        Those cells get zeros in place of their missing columns: they are nodata in every output and left out of
        the summaries, so the zeros only keep the engine's arrays finite.
        """
        sources = self.covariate_sources(parameters, context)
        if not sources:
            return None, inside
        cells = CellCovariates.of(document.covariates.at_rows(sources, grid, 0, grid.n_rows, document.crs_wkt),
                                  grid, inside)
        if cells.missing:
            feedback.pushWarning(f"{cells.missing:,} cells are nodata in every output because a covariate raster has "
                                 "no value there (nodata, outside the raster, or a class no sample has, whose "
                                 "coefficient cannot be estimated); they are left out of the summaries.")
        return cells.columns, cells.inside

    @staticmethod
    def log_conditioning(neighbours: int, search_radius: float | None, count: int, units: str, feedback) -> None:
        """Say which samples condition each cell (all, or the nearest ``neighbours``)."""
        if neighbours == 0:
            feedback.pushInfo(f"Conditioning every cell on all {count} samples.")
        else:
            feedback.pushInfo(f"Local conditioning: each cell on its {min(neighbours, count)} nearest "
                              f"samples{search_words(search_radius, units)}.")

    @staticmethod
    def log_method(result: SimulationResult, feedback) -> None:
        """Say how the fields were drawn, and pass the engine's notes (as information) and warnings on."""
        padded = "" if result.padded_shape is None else \
            f" on a {result.padded_shape[0]} x {result.padded_shape[1]} torus"
        feedback.pushInfo(f"Unconditional fields by {result.method}{padded}; samples drawn from their "
                          f"{result.neighbourhood_side} x {result.neighbourhood_side} nearest lattice nodes.")
        for note in result.notes:
            feedback.pushInfo(note)
        for warning in result.warnings:
            feedback.pushWarning(warning)

    @staticmethod
    def log_unresolved(result: SimulationResult, inside: np.ndarray | None, feedback) -> None:
        """Count the cells (of the mask) that local conditioning left nodata; nothing when there are none."""
        unresolved = result.unresolved_cells(inside)
        if unresolved:
            feedback.pushWarning(f"{unresolved:,} cell(s) are nodata in every realisation: fewer samples "
                                 "than the mean model needs lie within SEARCH_RADIUS of them (or their neighbours "
                                 "make a singular system); they are left out of the summaries. Enlarge "
                                 "SEARCH_RADIUS, or leave it empty, to fill them.")

    @staticmethod
    def check_nodata(result: SimulationResult, summary: RealisationSummary | None, inside: np.ndarray | None,
                     paths: dict, field: str, feedback) -> None:
        """Refuse rasters that would be nodata at every simulated cell (values beyond Float32), warn when mostly."""
        rasters = {f"{field} realisations": result.realisations}
        rasters.update({f"{field} {attribute}": getattr(summary, attribute)
                        for name, _, attribute in SUMMARY_RASTERS if paths[name] and summary is not None})
        counts = NodataCounts.of_rasters(rasters, inside, np.isnan(result.realisations[0]))
        if counts.error() is not None:
            raise counts.error()
        for warning in counts.warnings():
            feedback.pushWarning(warning)

    def write_rasters(self, result: SimulationResult, summary: RealisationSummary | None,
                      inside: np.ndarray | None, paths: dict, threshold: float | None, field: str, crs_wkt: str,
                      metadata: dict) -> None:
        """Write every requested raster; the files appear together, after all are complete."""
        grid = result.grid
        bands = {name: getattr(summary, attribute) for name, _, attribute in SUMMARY_RASTERS if paths[name]}
        descriptions = {name: f"{description.lower()} of {field} (attribute units)"
                        for name, description, _ in SUMMARY_RASTERS}
        if paths[self.OUTPUT_EXCEEDANCE]:
            bands[self.OUTPUT_EXCEEDANCE] = summary.share_above
            descriptions[self.OUTPUT_EXCEEDANCE] = (f"share of {len(result.realisations)} realisations with {field} "
                                                    f"above {threshold:g} attribute units")
        with contextlib.ExitStack() as stack:
            count = len(result.realisations)
            writer = stack.enter_context(GeoTiffWriter(
                paths[self.OUTPUT], grid, count, crs_wkt,
                [f"realisation {index + 1} of {count}: {field} (attribute units)" for index in range(count)],
                metadata))
            for index, realisation in enumerate(result.realisations):
                writer.write_block(index, 0, masked(realisation, inside))
            writers = [writer]
            for name, band in bands.items():
                summary_writer = stack.enter_context(GeoTiffWriter(paths[name], grid, 1, crs_wkt,
                                                                   [descriptions[name]], metadata))
                summary_writer.write_block(0, 0, masked(band, inside))
                writers.append(summary_writer)
            for finished in writers:
                finished.commit()

    def polygon_source(self, parameters, context, threshold: float | None):
        """The AREAS source (None when not given), refused without a THRESHOLD or a table to write to."""
        if parameters.get(self.AREAS) in (None, ""):
            return None
        if threshold is None:
            raise FieldcastError("Areas per polygon (AREAS) are areas above a threshold: set THRESHOLD, or leave "
                                 "AREAS empty.")
        if parameters.get(self.OUTPUT_AREAS) in (None, ""):
            raise FieldcastError("AREAS is set but the polygon area table (OUTPUT_AREAS) is not: choose a file for "
                                 "OUTPUT_AREAS, or leave AREAS empty.")
        return self.feature_source(parameters, self.AREAS, context, "The polygon layer (AREAS) is empty. Choose a "
                                   "layer that holds the units, or leave AREAS empty.")

    def write_polygon_areas(self, parameters, context, source, result: SimulationResult, grid: GridSpec,
                            threshold: float, inside: np.ndarray | None, working_wkt: str) -> str:
        """The polygon area table: feature id, realisation, area (and volume) above the threshold, one row each."""
        features, polygons = working_polygons(source, working_wkt, context)
        found = polygon_areas_above(result.realisations, grid, [wkb for _, wkb in polygons], threshold,
                                    depths=self.optional_number(parameters, self.DEPTH, context), mask=inside)
        fields = QgsFields()
        for name, kind in (("feature_id", "LongLong"), ("realisation", "Int"), ("area_above", "Double"),
                           ("volume_above", "Double")):
            fields.append(QgsField(name, field_type(kind)))
        with checked_sink(self, parameters, self.OUTPUT_AREAS, context, fields, QgsWkbTypes.NoGeometry,
                          QgsCoordinateReferenceSystem()) as sink:
            for row, (index, _) in enumerate(polygons):
                for number, (area, volume) in enumerate(zip(found.area_above[row], found.volume_above[row]), 1):
                    feature = QgsFeature(fields)
                    feature.setAttributes([features[index].id(), number, _number(area), _number(volume)])
                    sink.add(feature)
        return sink.destination

    def write_table(self, parameters, context, summary: RealisationSummary) -> str:
        """The realisation table: number, area above the threshold and mean over the mask, one row each."""
        fields = QgsFields()
        fields.append(QgsField("realisation", field_type("Int")))
        fields.append(QgsField("area_above", field_type("Double")))
        fields.append(QgsField("mask_mean", field_type("Double")))
        with checked_sink(self, parameters, self.OUTPUT_TABLE, context, fields, QgsWkbTypes.NoGeometry,
                          QgsCoordinateReferenceSystem()) as sink:
            for index, mean in enumerate(summary.mask_mean):
                feature = QgsFeature(fields)
                area = None if summary.area_above is None else float(summary.area_above[index])
                feature.setAttributes([index + 1, area, float(mean)])
                sink.add(feature)
        return sink.destination


def _number(value: float) -> float | None:
    return float(value) if np.isfinite(value) else None


def masked(values: np.ndarray, inside: np.ndarray | None) -> np.ndarray:
    """``values`` (n_rows, n_cols) with cells outside the mask set to NaN (written as nodata)."""
    return values if inside is None else np.where(inside, values, np.nan)
