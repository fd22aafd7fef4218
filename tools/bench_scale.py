"""Benchmark cases at scale: local kriging of many samples or many cells, the Vecchia fit, and many fields.

Samples come from one circulant-embedding realisation (algorithms.simulate.circulant) of a known anisotropic
exponential model on a fine lattice over a 10 km square, sampled at distinct random cells plus nugget
noise, so their joint law is exactly the model's and drawing 100,000 of them takes seconds. The Vecchia plan row
orders invented samples scattered uniformly over the square (the plan needs no values).
"""
from __future__ import annotations

import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from osgeo import ogr

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))  # the repository loader, Meuse support
from repo_package import load_repo_package  # noqa: E402

load_repo_package()
from fieldcast.algorithms import (  # noqa: E402
    CovarianceModel,
    FieldRasters,
    FitOptions,
    GridSpec,
    LocalKrigingPredictor,
    MeanModel,
    Neighbourhood,
    Structure,
    SurfaceScale,
    Transform,
    UnconditionalGenerator,
    VecchiaPlan,
    cell_mask,
    cell_predictor,
    choose_predictor,
    fit_model,
    fit_shared,
    fit_vecchia,
    log_likelihood,
    output_grid,
    write_surfaces,
)

SIDE = 10_000.0
"""Side of the study square (metres)."""

MODEL = CovarianceModel((Structure("exponential", 1.0, 1500.0, azimuth=30.0, ratio=0.5),), 0.1)
"""The simulated model: effective range about 4.5 km along azimuth 30, half that across."""

CHI2_95 = {5: 11.07}
"""95 % quantile of the chi-square distribution (Wilks 1938 likelihood-ratio region), 5 degrees of freedom."""


def simulated(n: int, seed: int = 7, cells_per_side: int = 1000) -> tuple[np.ndarray, np.ndarray]:
    """``n`` samples of a field drawn from :data:`MODEL` at distinct lattice cells, plus nugget noise."""
    rng = np.random.default_rng(seed)
    pixel = SIDE / cells_per_side
    field, _ = UnconditionalGenerator(MODEL, (cells_per_side, cells_per_side), pixel).draw_pair(rng)
    cells = rng.choice(cells_per_side ** 2, n, replace=False)
    rows, cols = np.divmod(cells, cells_per_side)
    xy = np.column_stack([(cols + 0.5) * pixel, SIDE - (rows + 0.5) * pixel])
    return xy, 5.0 + field.ravel()[cells] + rng.normal(0.0, math.sqrt(MODEL.nugget), n)


def _local_million() -> str:
    xy, values = simulated(100_000)
    start = time.perf_counter()
    predictor = LocalKrigingPredictor(xy, values, MODEL, MeanModel.for_data("constant", xy), neighbours=32)
    targets = GridSpec(0.0, SIDE, SIDE / 1000, 1000, 1000).cell_centres()
    mean, variance = predictor.predict(targets)
    seconds = time.perf_counter() - start
    return (f"{mean.size:,} cells in {seconds:.1f} s after simulating the samples; variance "
            f"{variance.min():.3f}..{variance.max():.3f}; unresolved {predictor.last_unresolved}")


def _local_million_global_trend() -> str:
    xy, values = simulated(100_000)
    start = time.perf_counter()
    predictor, _ = choose_predictor(xy, values, MODEL, MeanModel.for_data("linear", xy), Neighbourhood(32))
    built = time.perf_counter() - start
    mean, variance = predictor.predict(GridSpec(0.0, SIDE, SIDE / 1000, 1000, 1000).cell_centres())
    seconds = time.perf_counter() - start
    return (f"{mean.size:,} cells in {seconds:.1f} s ({built:.1f} s for the global trend, "
            f"{predictor.trend.method}); unresolved {predictor.last_unresolved}")


def _write_surface(predictor: LocalKrigingPredictor, grid: GridSpec, paths: list[Path],
                   inside: np.ndarray | None = None, variance_factors: list[float] | None = None) -> None:
    """Prediction and variance rasters of every cell inside ``inside``, one pair of GeoTIFFs per field.

    This is the shipped writer (:func:`write_surfaces`, as predict and predictmany call it), so the
    benchmark times the code users run. With several fields the predictor holds one value column per path,
    and field ``j``'s variance is the predictor's times ``variance_factors[j]``.
    """
    factors = variance_factors or [1.0] * len(paths)
    fields = [FieldRasters(path.stem, {"prediction": str(path), "variance": str(path.with_suffix(".variance.tif"))},
                           {}, factor) for path, factor in zip(paths, factors)]
    write_surfaces(cell_predictor(predictor, "point", grid.pixel_size), grid, inside, SurfaceScale(Transform()),
                   "EPSG:28992", fields)


def _ten_million_to_geotiff() -> str:
    xy, values = simulated(1000)
    predictor = LocalKrigingPredictor(xy, values, MODEL, MeanModel.for_data("constant", xy), neighbours=32)
    grid = GridSpec(0.0, SIDE, 2.5, 4000, 2500)
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "prediction.tif"
        _write_surface(predictor, grid, [path])
        size = path.stat().st_size + path.with_suffix(".variance.tif").stat().st_size
    return f"{grid.n_cells:,} cells (local kriging, 32 neighbours), GeoTIFF {size / 1e6:.0f} MB"


def fields_at_shared_locations(n: int, n_fields: int, seed: int = 11, cells_per_side: int = 500) -> tuple:
    """``n`` distinct lattice-cell locations and ``n_fields`` independent fields of :data:`MODEL` observed there."""
    rng = np.random.default_rng(seed)
    pixel = SIDE / cells_per_side
    generator = UnconditionalGenerator(MODEL, (cells_per_side, cells_per_side), pixel)
    cells = rng.choice(cells_per_side ** 2, n, replace=False)
    rows, cols = np.divmod(cells, cells_per_side)
    xy = np.column_stack([(cols + 0.5) * pixel, SIDE - (rows + 0.5) * pixel])
    fields = [field.ravel()[cells] for _ in range(0, n_fields, 2) for field in generator.draw_pair(rng)]
    return xy, [5.0 + field + rng.normal(0.0, math.sqrt(MODEL.nugget), n) for field in fields[:n_fields]]


def _grid_and_mask(xy: np.ndarray) -> tuple[GridSpec, np.ndarray]:
    """What predict does before kriging: the default grid over the samples, and a disc-shaped polygon mask."""
    grid = output_grid(xy)  # the shipped grid choice for empty EXTENT and PIXEL_SIZE
    disc = ogr.CreateGeometryFromWkt(f"POINT ({SIDE / 2} {SIDE / 2})").Buffer(SIDE / 2, 64)
    return grid, cell_mask(grid, [bytes(disc.ExportToWkb())])


def _many_fields() -> str:
    xy, fields = fields_at_shared_locations(1000, 10)
    seconds = {}
    with tempfile.TemporaryDirectory() as folder:
        start = time.perf_counter()
        for index, values in enumerate(fields):  # ten single runs: a fit, a grid and mask, a kriging pass each
            fitted = fit_model(xy, values, kernel="exponential", anisotropy=False, mean="constant")
            grid, inside = _grid_and_mask(xy)
            predictor = LocalKrigingPredictor(xy, values, fitted.covariance, fitted.mean, neighbours=32)
            _write_surface(predictor, grid, [Path(folder) / f"single_{index}.tif"], inside)
        seconds["single"] = time.perf_counter() - start
        start = time.perf_counter()  # one predictmany run with one correlation model for all fields
        shared = fit_shared(xy, np.column_stack(fields), FitOptions(kernel="exponential", anisotropy=False))
        grid, inside = _grid_and_mask(xy)
        predictor = LocalKrigingPredictor(xy, np.column_stack(fields), shared[0].covariance, shared[0].mean,
                                          neighbours=32)
        _write_surface(predictor, grid, [Path(folder) / f"many_{index}.tif" for index in range(len(fields))], inside,
                       [fit.covariance.sill / shared[0].covariance.sill for fit in shared])
        seconds["shared"] = time.perf_counter() - start
    ratio = seconds["shared"] / seconds["single"]
    return (f"10 fields, n=1,000, {grid.n_cells:,} cells, 32 neighbours: 10 single runs (fit, grid, mask, kriging, "
            f"writing each) {seconds['single']:.0f} s; predictmany with one correlation model for all fields (joint "
            f"fit, one kriging pass for all) {seconds['shared']:.0f} s; time ratio {ratio:.2f} (with a model per "
            "field predictmany does the single runs' work, sharing only the grid and mask)"), ratio < 0.5


def _vecchia_fifty_thousand() -> str:
    xy, values = simulated(50_000)
    start = time.perf_counter()
    result = fit_vecchia(xy, values, FitOptions(kernel="exponential", anisotropy=True, mean="constant"))
    seconds = time.perf_counter() - start
    subset = np.random.default_rng(1).choice(len(values), 2000, replace=False)
    exact = fit_model(xy[subset], values[subset], kernel="exponential", anisotropy=True, mean="constant")
    ratio_statistic = 2.0 * (exact.log_likelihood - log_likelihood(xy[subset], values[subset], result.covariance,
                                                                    exact.mean, "reml"))
    ours, theirs = result.covariance.structures[0], exact.covariance.structures[0]
    return (f"Vecchia fit {seconds:.0f} s: range {ours.range:.0f}, azimuth {ours.azimuth:.0f}, ratio "
            f"{ours.ratio:.2f}, sill {result.covariance.sill:.2f}, nugget {result.covariance.nugget:.3f}; exact REML "
            f"on 2,000: range {theirs.range:.0f}, azimuth {theirs.azimuth:.0f}, ratio {theirs.ratio:.2f}, sill "
            f"{exact.covariance.sill:.2f}, nugget {exact.covariance.nugget:.3f}; likelihood-ratio statistic of the "
            f"Vecchia estimate on the subset {ratio_statistic:.2f} (95 % region: <= {CHI2_95[5]}); true: range 1500, "
            "azimuth 30, ratio 0.50, sill 1.10, nugget 0.100")


def _vecchia_plan() -> str:
    xy = np.random.default_rng(3).uniform(0.0, SIDE, size=(100_000, 2))
    plan = VecchiaPlan.build(xy, 30)
    return (f"maximin order of {len(plan.order):,} samples and their {plan.size} nearest earlier ones "
            f"({int(plan.valid.sum()):,} neighbour entries)")


def cases() -> list[dict]:
    """The scale benchmark cases (see tools/bench.py)."""
    return [
        {"name": "local kriging, n=100,000, 32 neighbours, 10^6 cells with variance", "target": "< 30 s, < 2 GB",
         "seconds": 30.0, "memory_mb": 2048.0, "run": _local_million},
        {"name": "local kriging around a global linear trend, n=100,000, 32 neighbours over 8 sectors, 10^6 cells "
                 "with variance", "target": "< 30 s, < 2 GB", "seconds": 30.0, "memory_mb": 2048.0,
         "run": _local_million_global_trend},
        {"name": "local kriging, n=1,000, 4000 x 2500 cells with variance to GeoTIFF", "target": "< 2 GB",
         "seconds": None, "memory_mb": 2048.0, "run": _ten_million_to_geotiff},
        {"name": "Vecchia plan (order + 30 previous neighbours) of 10^5 scattered samples", "target": "< 3 s",
         "seconds": 3.0, "memory_mb": None, "run": _vecchia_plan},
        {"name": "Vecchia REML fit, n=50,000, anisotropic exponential", "target": "reported", "seconds": None,
         "memory_mb": None, "run": _vecchia_fifty_thousand},
        {"name": "predictmany with 10 fields vs 10 single runs: time ratio", "target": "ratio < 0.5",
         "seconds": None, "memory_mb": None, "run": _many_fields},
    ]
