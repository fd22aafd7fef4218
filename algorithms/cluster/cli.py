"""The command line of the engine: a grid kriged from a model file outside QGIS, in one process or on Dask.

``python -m <plugin folder>.algorithms.cluster --model zinc.json --samples meuse.gpkg --field zinc
--pixel-size 10 --out zinc.tif [--variance zinc_var.tif] [--workers 2 | --scheduler tcp://host:8786]
[--layout vrt]``

Every bad input ends the run with one line that says what to change and exit status 2; a cancel
(Ctrl-C, SIGTERM) with status 130. No output file is left in either case.
"""
from __future__ import annotations

import argparse
import math
import re
import sys
from collections.abc import Callable, Sequence

from ..errors import Cancelled, FieldcastError
from ..io.interruption import termination_cleanup
from ..io.nodata_counts import NodataCounts
from ..predict.choice import LogLine, Neighbourhood
from ..predict.grid_surfaces import BACKTRANSFORMS
from .job import MAP_AREAS, GridJob, GridRun, prepare_job
from .stored_rasters import LAYOUTS

PROGRAM = "fieldcast"
"""What starts every line the command line prints."""
OPTION_WORDS = {"EXTENT": "--extent", "PIXEL_SIZE": "--pixel-size", "TEMPLATE": "--template",
                "NEIGHBOURS": "--neighbours", "SEARCH_RADIUS": "--search-radius", "THRESHOLD": "--threshold",
                "INTERVAL_PROBABILITY": "--interval", "BACKTRANSFORM": "--backtransform",
                "MAP_AREA": "--map-area", "HULL_MARGIN": "--hull-margin",
                "TEMPLATE_NODATA_MASK to false": "--template-nodata map"}
"""Toolbox parameter names in the engine's messages, and the options that set them here."""
DESCRIPTION = ("Krige a grid from a Fieldcast model file and point samples, in this process or on Dask. The results "
               "are model-based estimates: read the variance or standard error beside the prediction; decisions "
               "follow local regulations and licensed professional judgement.")
OUTPUT_OPTIONS = {"prediction": "out", "variance": "variance", "sd": "sd", "lower": "lower", "upper": "upper",
                  "exceedance": "exceedance", "distance": "distance"}
"""Output kind -> its option (``--out`` for the prediction)."""


def command_words(message: str) -> str:
    """``message`` with the toolbox parameter names of :data:`OPTION_WORDS` replaced by their options."""
    return re.sub(r"\b(" + "|".join(OPTION_WORDS) + r")\b", lambda match: OPTION_WORDS[match.group(1)], message)


class OneLineParser(argparse.ArgumentParser):
    """An argument parser whose refusals are one line (what is wrong and where the options are), status 2."""

    def error(self, message: str):
        self.exit(2, f"{PROGRAM}: {message}. Run {self.prog} --help for the options.\n")


def number(text: str) -> float:
    """A finite number, else an argparse refusal."""
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"{text!r} is not a number")
    return value


def whole_number(text: str) -> int:
    """A whole number, else an argparse refusal."""
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None


def extent(text: str) -> tuple[float, float, float, float]:
    """``x_min,y_min,x_max,y_max`` as four numbers, else an argparse refusal."""
    parts = text.split(",")
    try:
        values = tuple(number(part) for part in parts)
    except argparse.ArgumentTypeError:
        values = ()
    if len(values) != 4:
        raise argparse.ArgumentTypeError(f"{text!r} is not x_min,y_min,x_max,y_max (four numbers in the model's "
                                         "CRS, e.g. 178500,329600,181500,333700)")
    return values


def parser() -> OneLineParser:
    """The options of the command line."""
    parse = OneLineParser(prog=f"python -m {__package__}", description=DESCRIPTION)
    parse.add_argument("--model", required=True, help="model file written by 'Fit covariance model'")
    parse.add_argument("--samples", required=True, help="point file of the samples (GeoPackage, shapefile, ...)")
    parse.add_argument("--layer", default="", help="layer of --samples, when it holds several")
    parse.add_argument("--field", required=True, help="numeric field of the samples (the one the model was fitted "
                       "to)")
    parse.add_argument("--extent", type=extent, help="x_min,y_min,x_max,y_max in the model's CRS (default: the "
                       "samples' extent)")
    parse.add_argument("--pixel-size", type=number, help="cell width in the model's CRS units (default: from the "
                       "sample spacing)")
    parse.add_argument("--template", default="", help="raster whose grid the outputs take (in the model's CRS), "
                       "instead of --extent and --pixel-size")
    parse.add_argument("--template-nodata", choices=("mask", "map"), default="mask", help="mask (default): the "
                       "--template's nodata cells stay nodata; map: krige them too")
    parse.add_argument("--map-area", choices=MAP_AREAS, default="hull", help="hull (default): only cells near the "
                       "samples' convex hull; extent: every cell")
    parse.add_argument("--hull-margin", type=number, help="how far the hull is grown (model CRS units; default: the "
                       "median sample spacing)")
    for kind, option in OUTPUT_OPTIONS.items():
        parse.add_argument(f"--{option}", default="", required=kind == "prediction",
                           help=f"GeoTIFF of the {kind}" + (" (required)" if kind == "prediction" else ""))
    parse.add_argument("--threshold", type=number, help="threshold of the exceedance probability (attribute units)")
    parse.add_argument("--interval", type=number, default=0.9, help="probability of the central interval of "
                       "--lower and --upper (default 0.9)")
    parse.add_argument("--backtransform", choices=BACKTRANSFORMS, default="median",
                       help="back-transform of a log model (default median)")
    parse.add_argument("--neighbours", type=whole_number, default=0, help="nearest samples per cell (default 0: "
                       "every sample, local kriging above 5,000)")
    parse.add_argument("--search-radius", type=number, help="largest distance of a neighbour (with --neighbours)")
    parse.add_argument("--layout", choices=LAYOUTS, default="tiff", help="tiff (default): each output one tiled "
                       "GeoTIFF; vrt: each output (give it a .vrt name) a VRT of one GeoTIFF per block of rows beside "
                       "it (with --workers or --scheduler)")
    where = parse.add_mutually_exclusive_group()
    where.add_argument("--workers", type=whole_number, help="krige on a local Dask cluster of this many worker "
                       "processes (needs dask and distributed)")
    where.add_argument("--scheduler", default="", help="krige on the Dask cluster of this scheduler address, e.g. "
                       "tcp://10.0.0.5:8786 (needs dask and distributed)")
    return parse


def job_of(options: argparse.Namespace) -> GridJob:
    """The job the options describe."""
    if options.template and (options.extent is not None or options.pixel_size is not None):
        raise FieldcastError("--template gives the grid, so --extent and --pixel-size cannot be given beside it. "
                             "Leave out --template, or --extent and --pixel-size.")
    if options.workers is not None and options.workers < 1:
        raise FieldcastError(f"--workers is {options.workers}; a Dask cluster needs at least 1 worker. Give 1 or "
                             "more, or leave out --workers to run in this process.")
    if options.layout == "vrt" and options.workers is None and not options.scheduler:
        raise FieldcastError("--layout vrt writes the blocks of a Dask run as tiles; give --workers or --scheduler, "
                             "or leave out --layout to write GeoTIFFs in this process.")
    outputs = {kind: getattr(options, option.replace("-", "_")) for kind, option in OUTPUT_OPTIONS.items()}
    for kind, path in outputs.items():
        if options.layout == "vrt" and path and not path.lower().endswith(".vrt"):
            raise FieldcastError(f"--layout vrt writes each output as a VRT, but --{OUTPUT_OPTIONS[kind]} is {path}. "
                                 "Give it a name ending in .vrt, or leave out --layout.")
    return GridJob(options.model, options.samples, options.field, outputs, options.extent, options.pixel_size,
                   options.template, options.layer, Neighbourhood(options.neighbours, options.search_radius),
                   options.backtransform, options.threshold, options.interval, options.map_area, options.hull_margin,
                   options.template_nodata)


def runner(options: argparse.Namespace) -> Callable[[GridRun, Callable[[float], None]], NodataCounts]:
    """``execute(run, progress)``: on Dask when --workers or --scheduler is given (Dask imported now, so that
    its absence is said before any work), otherwise in this process."""
    if options.workers is None and not options.scheduler:
        from .runners import run_in_process
        return lambda run, progress: run_in_process(run, progress)
    from .dask_runner import import_distributed, run_on_dask
    import_distributed()
    return lambda run, progress: run_on_dask(run, workers=options.workers or 2, scheduler=options.scheduler,
                                             layout=options.layout, progress=progress)


def printer(stream) -> Callable[[float], None]:
    """Progress for the terminal: a line at every further tenth of the work."""
    shown = [0]

    def progress(fraction: float) -> None:
        tenth = int(fraction * 10)
        if tenth > shown[0]:
            shown[0] = tenth
            print(f"{PROGRAM}: {10 * tenth} % done", file=stream, flush=True)
    return progress


def say(lines: Sequence[LogLine], stream) -> None:
    """Log lines on ``stream``, warnings marked."""
    for line in lines:
        prefix = "warning: " if line.level == "warning" else ""
        print(f"{PROGRAM}: {prefix}{command_words(line.text)}", file=stream)


def unresolved_words(unresolved: int, singular: int) -> str:
    """The warning for ``unresolved`` cells left nodata, ``singular`` of them for a singular neighbour system."""
    if not singular:
        return (f"{unresolved:,} cell(s) are nodata: fewer samples than the mean model needs lie within "
                "--search-radius of them. Enlarge --search-radius, or leave it out, to fill them.")
    return (f"{unresolved:,} cell(s) are nodata, {singular:,} of them because their neighbours make a singular "
            "system (samples too close together for the model), the others for too few samples within "
            "--search-radius. Change --neighbours, or merge samples that lie very close together, to fill them.")


def main(argv: Sequence[str] | None = None, stream=None) -> int:
    """Run the command line with ``argv`` (default: the process's); the exit status.

    0: the rasters are written; 2: a bad input (one line on ``stream``, default standard error, says what to
    change); 130: cancelled; 1: an internal error (reported in one line, without traceback).
    """
    stream = sys.stderr if stream is None else stream
    options = parser().parse_args(argv)
    try:
        with termination_cleanup():
            job = job_of(options)
            execute = runner(options)
            run = prepare_job(job)
            say(run.lines, stream)
            counts = execute(run, printer(stream))
    except (Cancelled, KeyboardInterrupt):
        print(f"{PROGRAM}: cancelled; no output file was written.", file=stream)
        return 130
    except FieldcastError as exc:
        print(f"{PROGRAM}: {command_words(str(exc))}", file=stream)
        return 2
    except Exception as exc:  # noqa: BLE001  (no traceback reaches the user)
        print(f"{PROGRAM}: internal error ({type(exc).__name__}: {exc}). Please report it with the command line "
              "used.", file=stream)
        return 1
    unresolved = [LogLine("warning", unresolved_words(counts.unresolved, run.singular))] if counts.unresolved else []
    say(unresolved + [LogLine("warning", text) for text in counts.warnings()] + run.check.lines(run.units), stream)
    written = [path for path in job.outputs.values() if path]
    print(f"{PROGRAM}: wrote {', '.join(written)}.", file=stream)
    return 0
