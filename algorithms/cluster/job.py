"""A grid kriging job described by files (model file, sample file, grid, outputs), made ready to run.

:class:`GridJob` is what the command line (:mod:`.cli`) reads; :func:`prepare_job` turns it into a
:class:`GridRun`: the model loaded, the samples read and put in the modelling scale, the grid, the predictor
(global or local by NEIGHBOURS, :func:`..predict.choice.choose_predictor`) and the extrapolation check. A run
is kriged block by block by the same :func:`..predict.grid_surfaces.krige_block`, in this process
(:func:`.runners.run_in_process`) or as Dask tasks (:func:`.dask_runner.run_on_dask`).
"""
from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from ..errors import FieldcastError
from ..io.crs import same_crs
from ..io.grid import GridSpec, output_grid
from ..io.mask import hull_map_area
from ..io.model_file import ModelDocument
from ..io.samples import check_samples, merge_coincident
from ..io.staging import refuse_read_only
from ..io.template import RasterTemplate
from ..predict.choice import LogLine, Neighbourhood, choose_predictor
from ..predict.extrapolation import ExtrapolationCheck
from ..predict.grid_surfaces import SURFACE_KINDS, CellPredictor, FieldRasters, SurfaceScale, cell_predictor
from ..predict.kriging import KrigingPredictor
from ..predict.local import LocalKrigingPredictor
from .point_file import read_point_file

MAP_AREAS = ("hull", "extent")
"""Where a job krigs: the samples' convex hull grown by a margin, or every cell of the grid."""
OUTPUT_KINDS = (*SURFACE_KINDS, "distance")
"""The rasters a job can write: those of :data:`..predict.grid_surfaces.SURFACE_KINDS` and the distance to the
nearest sample."""


@dataclass(frozen=True)
class GridJob:
    """A grid kriging run described by files.

    Attributes
    ----------
    model : str
        Model file written by 'Fit covariance model' (fieldcast:fitmodel).
    samples : str
        Vector file of the point samples; ``layer`` names its layer when it holds several.
    field : str
        Numeric attribute of the samples (the one the model was fitted to).
    outputs : Mapping[str, str]
        GeoTIFF destination of each raster wanted, by kind of :data:`OUTPUT_KINDS`; ``"prediction"`` is required.
    extent : tuple of float, optional
        ``x_min, y_min, x_max, y_max`` in the model's CRS; None = the samples' extent (ignored with ``template``).
    pixel_size : float, optional
        Cell width in the model's CRS units; None = derived from the sample spacing.
    template : str
        Raster whose grid (corner, cell size, size) the outputs take; its CRS must be the model's.
    layer : str
        Layer of ``samples`` (empty: its only layer).
    neighbourhood : Neighbourhood
        NEIGHBOURS and SEARCH_RADIUS.
    backtransform : str
        ``"median"`` or ``"mean"`` for a log model.
    threshold : float, optional
        Threshold of the exceedance probability (attribute units); needed for an ``"exceedance"`` output.
    interval : float
        Probability of the central interval of the ``"lower"`` and ``"upper"`` rasters.
    map_area : str
        ``"hull"``: only cells within ``hull_margin`` of the samples' convex hull are kriged (the others are
        nodata); ``"extent"``: every cell.
    hull_margin : float, optional
        How far the hull is grown (CRS units); None = the median sample spacing (:func:`..io.mask.hull_mask`).
    template_nodata : str
        ``"mask"``: the template's nodata cells stay nodata; ``"map"``: they are kriged too.
    """

    model: str
    samples: str
    field: str
    outputs: Mapping[str, str]
    extent: tuple[float, float, float, float] | None = None
    pixel_size: float | None = None
    template: str = ""
    layer: str = ""
    neighbourhood: Neighbourhood = field(default_factory=Neighbourhood)
    backtransform: str = "median"
    threshold: float | None = None
    interval: float = 0.9
    map_area: str = "hull"
    hull_margin: float | None = None
    template_nodata: str = "mask"

    def check_outputs(self) -> None:
        """Refuse outputs that cannot be written as asked, before any work.

        Raises
        ------
        FieldcastError
            Without a prediction output, for an unknown kind, an exceedance output without a threshold, an
            output that is an input or another output, or a read-only destination.
        """
        paths = {kind: path for kind, path in self.outputs.items() if path}
        unknown = sorted(set(paths) - set(OUTPUT_KINDS))
        if unknown:
            raise FieldcastError(f"Unknown output kind(s) {', '.join(unknown)}; the kinds are "
                                 f"{', '.join(OUTPUT_KINDS)}.")
        if "prediction" not in paths:
            raise FieldcastError("No prediction raster is asked for: give its file with --out.")
        if "exceedance" in paths and self.threshold is None:
            raise FieldcastError("The exceedance raster needs a threshold: give --threshold (attribute units), or "
                                 "leave out --exceedance.")
        inputs = {os.path.realpath(path): what for path, what in ((self.model, "the model file (--model)"),
                                                                 (self.samples, "the sample file (--samples)"),
                                                                 (self.template, "the template (--template)"))
                  if path}
        taken: dict[str, str] = {}
        for kind, path in paths.items():
            real = os.path.realpath(path)
            if real in inputs:
                raise FieldcastError(f"The {kind} output {path} is {inputs[real]}, which would be lost. Choose "
                                     "another output file name.")
            if real in taken:
                raise FieldcastError(f"The {kind} and {taken[real]} outputs are both {path}. Give each output its "
                                     "own file name.")
            taken[real] = kind
            refuse_read_only(path, kind)


@dataclass
class GridRun:
    """A prepared grid run: everything the block function needs, and the log so far.

    Attributes
    ----------
    predictor : KrigingPredictor or LocalKrigingPredictor
        Built from the samples and the model (factorised once).
    grid : GridSpec
        Output grid, in the model's CRS.
    scale : SurfaceScale
        Transform, back-transform, threshold and interval of the outputs (point support).
    crs_wkt : str
        The model's CRS, the outputs'.
    fields : list of FieldRasters
        The one field's destinations and metadata.
    check : ExtrapolationCheck
        The samples and model the extrapolation counts are made from (it accumulates them).
    inside : ndarray of bool, shape (n_rows, n_cols), or None
        The cells kriged (MAP_AREA hull), None: every cell.
    distance_path : str
        Destination of the distance raster ("" for none).
    units : str
        The CRS's linear unit, for the log.
    lines : list of LogLine
        What preparing the run has to say.
    singular : int
        Cells left nodata because their neighbours made a singular system (local kriging), set by the runner.
    """

    predictor: KrigingPredictor | LocalKrigingPredictor
    grid: GridSpec
    scale: SurfaceScale
    crs_wkt: str
    fields: list[FieldRasters]
    check: ExtrapolationCheck
    inside: np.ndarray | None = None
    distance_path: str = ""
    units: str = "metre"
    lines: list[LogLine] = field(default_factory=list)
    singular: int = 0

    def cell_predictor(self) -> CellPredictor:
        """Kriging at cell centres with the run's predictor (:func:`..predict.grid_surfaces.cell_predictor`)."""
        return cell_predictor(self.predictor)


def singular_targets(predictor: KrigingPredictor | LocalKrigingPredictor) -> int:
    """Cells a local predictor left nodata for a singular neighbour system so far (0 for global kriging)."""
    return predictor.singular_targets if isinstance(predictor, LocalKrigingPredictor) else 0


def job_grid(job: GridJob, xy: np.ndarray, document: ModelDocument) -> tuple[GridSpec, RasterTemplate | None]:
    """The grid of the job: the template's exactly (and the template), or EXTENT and PIXEL_SIZE (see
    :func:`..io.grid.output_grid`; no template).

    Raises
    ------
    FieldcastError
        For a template that cannot be read or is in another CRS than the model, or an unusable extent or pixel
        size.
    """
    if not job.template:
        return output_grid(xy, job.extent, job.pixel_size, document.units), None
    name = f"the template raster {os.path.basename(job.template)} (--template)"
    template = RasterTemplate.read(job.template, name)
    if not same_crs(template.crs_wkt, document.crs_wkt):
        raise FieldcastError(f"The{name[3:]} is not in the model's CRS, so its cells would not line up with the "
                             "model's distances. Warp it to the model's CRS first (gdalwarp -t_srs), or use --extent "
                             "and --pixel-size instead.")
    return template.grid, template


def template_cells(template: RasterTemplate, inside: np.ndarray | None) -> tuple[np.ndarray | None, list[LogLine]]:
    """``inside`` (None: every cell) without the template's nodata cells, and the log line that says how many.

    Raises
    ------
    FieldcastError
        When no cell of the map area has a value in the template.
    """
    valid = template.valid_cells()
    if valid is None:
        return inside, []
    kept = valid if inside is None else valid & inside
    if not kept.any():
        raise FieldcastError(f"No cell of the map area has a value in {template.name}. Give --template-nodata map "
                             "to krige its nodata cells too, or set --map-area to extent.")
    return kept, [LogLine("info", f"Template nodata: {template.grid.n_cells - int(valid.sum()):,} of "
                                  f"{template.grid.n_cells:,} cells are nodata in {template.name} and stay nodata "
                                  "(give --template-nodata map to krige them).")]


def map_area(job: GridJob, grid: GridSpec, xy: np.ndarray, units: str) -> tuple[np.ndarray | None, list[LogLine]]:
    """The cells to krige (None: every cell) and the log line that says how many.

    Raises
    ------
    FieldcastError
        For an unknown map area, or a hull that keeps no cell centre of the grid.
    """
    if job.map_area not in MAP_AREAS:
        raise FieldcastError(f"MAP_AREA is {job.map_area!r}; choose one of {', '.join(MAP_AREAS)}.")
    if job.map_area == "extent":
        return None, []
    inside, line = hull_map_area(grid, xy, job.hull_margin, units)
    return inside, [LogLine("info", line)]


def prepare_job(job: GridJob) -> GridRun:
    """Load the model and the samples of ``job`` and build its predictor, grid and check.

    Raises
    ------
    FieldcastError
        For anything the job's files or settings do not allow, with what to change.
    """
    job.check_outputs()
    document = ModelDocument.load(job.model)
    if document.mean.covariate_names:
        raise FieldcastError(f"The model has covariates ({', '.join(document.mean.covariate_names)}), which the "
                             "command line does not read yet. Use 'Predict surface' in the Processing Toolbox for "
                             "this model, or fit one without covariates.")
    points = read_point_file(job.samples, job.field, document.crs_wkt, job.layer)
    merged = merge_coincident(points.xy, document.transform.forward(points.values))
    check_samples(merged.xy, merged.values)
    lines = [LogLine("info", f"Skipped {count} feature(s): {reason}.") for reason, count in points.skipped.items()]
    if merged.merged_groups:
        lines.append(LogLine("info", f"Averaged {merged.merged_points} samples at {merged.merged_groups} shared "
                                     f"locations (in the modelling scale); {len(merged.values)} samples remain."))
    grid, template = job_grid(job, merged.xy, document)
    inside, area = map_area(job, grid, merged.xy, document.units)
    if template is not None and job.template_nodata == "mask":
        inside, nodata = template_cells(template, inside)
        area += nodata
    scale = SurfaceScale(document.transform, job.backtransform, "point", job.threshold, job.interval)
    predictor, choice = choose_predictor(merged.xy, merged.values, document.covariance, document.mean,
                                         job.neighbourhood, units=document.units)
    metadata = {"fieldcast_model": document.to_dict(), "fieldcast_support": "point"}
    if document.transform.kind != "none":
        metadata["fieldcast_backtransform"] = job.backtransform
    paths = {kind: path for kind, path in job.outputs.items() if path and kind != "distance"}
    check = ExtrapolationCheck.for_samples(merged.xy, merged.values, document.covariance, document.mean,
                                           document.transform, [job.field])
    return GridRun(predictor, grid, scale, document.crs_wkt, [FieldRasters(job.field, paths, metadata)], check,
                   inside, job.outputs.get("distance", ""), document.units, lines + area + choice)
