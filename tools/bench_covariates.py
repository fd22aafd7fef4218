"""Benchmark case: covariate rasters do not change the order of cost of mapping.

The published Meuse samples with the published 40 m grid's distance to the river and flood-frequency class as
covariate GeoTIFFs (tests/reference.py), kriged onto 10^6 cells of 4 m over the grid's extent with the shipped
writer (write_surfaces), with the two covariates warped onto every block of rows, and without them on the same
cells (those the covariates cover). And local kriging of 10^5 simulated samples (tools/bench_scale.py) with two
invented smooth covariates onto 10^6 cells, around the trend estimated once from all samples.
"""
from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))  # the repository loader, Meuse support
from repo_package import load_repo_package  # noqa: E402

load_repo_package()
from bench_scale import MODEL, SIDE, simulated  # noqa: E402

from fieldcast.algorithms import (  # noqa: E402
    CovariateSource,
    FieldRasters,
    FitOptions,
    GridSpec,
    KrigingPredictor,
    MeanModel,
    Neighbourhood,
    SampleCovariates,
    SurfaceScale,
    Transform,
    cell_predictor,
    choose_predictor,
    fit_with,
    to_wkt2,
    write_surfaces,
)
from reference import load_meuse, write_meuse_covariates  # noqa: E402

COST_RATIO = 3.0
"""Largest ratio of the mapping time with the two covariates to that without them (the order of cost kept)."""


def _map_with_and_without() -> tuple[str, bool]:
    meuse = load_meuse()
    working = to_wkt2("EPSG:28992")
    with tempfile.TemporaryDirectory() as folder:
        dist, ffreq = write_meuse_covariates(Path(folder))
        sources = [CovariateSource("dist", str(dist)), CovariateSource("ffreq", str(ffreq), "class")]
        read = SampleCovariates.read(sources, meuse.xy, working)
        xy, values = meuse.xy[read.kept], np.log(meuse.zinc[read.kept])
        options = FitOptions(kernel="spherical", anisotropy=False,
                             mean=MeanModel.for_data("constant", xy, read.covariates.column_names))
        fitted = fit_with(xy, values, options, covariates=read.columns)
        grid = GridSpec(178440.0, 333760.0, 4.0, 1000, 1000)
        covered = np.all(np.isfinite(read.covariates.at_rows(sources, grid, 0, grid.n_rows, working)), axis=1)
        covered = covered.reshape(grid.n_rows, grid.n_cols)  # the run without covariates maps the same cells
        seconds = {}
        for label, covariates in (("with", read), ("without", None)):
            mean = fitted.mean if covariates else MeanModel.for_data("constant", xy)
            predictor = KrigingPredictor(xy, values, fitted.covariance, mean,
                                         read.columns if covariates else None)
            path = Path(folder) / f"{label}.tif"
            fields = [FieldRasters("zinc", {"prediction": str(path), "variance": str(path.with_suffix(".v.tif"))},
                                   {}, 1.0)]

            def rows(start: int, stop: int) -> np.ndarray:
                return read.covariates.at_rows(sources, grid, start, stop, working)

            started = time.perf_counter()
            write_surfaces(cell_predictor(predictor), grid, None if covariates else covered,
                           SurfaceScale(Transform()), working, fields, covariates=rows if covariates else None)
            seconds[label] = time.perf_counter() - started
    ratio = seconds["with"] / seconds["without"]
    return (f"{int(covered.sum()):,} of 10^6 cells covered: {seconds['with']:.1f} s with dist and ffreq, "
            f"{seconds['without']:.1f} s without "
            f"(ratio {ratio:.2f}, target <= {COST_RATIO:g})", ratio <= COST_RATIO)


def _invented_covariates(xy: np.ndarray) -> np.ndarray:
    """Two smooth covariates of our own (invented for the benchmark): waves across the square."""
    return np.column_stack([np.sin(xy[:, 0] / 1700.0), np.cos(xy[:, 1] / 2300.0 + xy[:, 0] / 5000.0)])


def _local_covariates() -> str:
    xy, values = simulated(100_000)
    start = time.perf_counter()
    mean = MeanModel.for_data("constant", xy, ("wave_x", "wave_xy"))
    predictor, _ = choose_predictor(xy, values, MODEL, mean, Neighbourhood(32), covariates=_invented_covariates(xy))
    targets = GridSpec(0.0, SIDE, SIDE / 1000, 1000, 1000).cell_centres()
    predicted, _ = predictor.predict(targets, _invented_covariates(targets))
    seconds = time.perf_counter() - start
    return f"{predicted.size:,} cells in {seconds:.1f} s; unresolved {predictor.last_unresolved}"


def cases() -> list[dict]:
    """The covariate benchmark case (see tools/bench.py)."""
    return [{"name": "covariates: Meuse n=150 with two covariate rasters, 10^6 cells", "target":
             f"with covariates <= {COST_RATIO:g}x without", "seconds": None, "memory_mb": 2048.0,
             "run": _map_with_and_without},
            {"name": "covariates: local kriging, n=100,000 with two covariates, 10^6 cells with variance",
             "target": "reported, < 2 GB", "seconds": None, "memory_mb": 2048.0, "run": _local_covariates}]
