"""Benchmark case: covariate rasters do not change the order of cost of mapping.

The published Meuse samples with the published 40 m grid's distance to the river and flood-frequency class as
covariate GeoTIFFs (tests/reference.py), kriged onto 10^6 cells of 4 m over the grid's extent with the shipped
writer (write_surfaces), with the two covariates warped onto every block of rows, and without them on the same
cells (those the covariates cover). Local kriging
does not take covariates yet, so the 10^5-sample case of the issue is not run.
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
from fieldcast.algorithms import (  # noqa: E402
    CovariateSource,
    FieldRasters,
    FitOptions,
    GridSpec,
    KrigingPredictor,
    MeanModel,
    SampleCovariates,
    SurfaceScale,
    Transform,
    cell_predictor,
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


def cases() -> list[dict]:
    """The covariate benchmark case (see tools/bench.py)."""
    return [{"name": "covariates: Meuse n=150 with two covariate rasters, 10^6 cells", "target":
             f"with covariates <= {COST_RATIO:g}x without", "seconds": None, "memory_mb": 2048.0,
             "run": _map_with_and_without}]
