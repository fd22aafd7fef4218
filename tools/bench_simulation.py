"""Benchmark cases for simulation, exceedance and block kriging (see tools/bench.py).

Run directly (``python tools/bench_simulation.py``) to print the table for these
cases only; ``make bench`` runs them with all others.
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))  # the repository loader, Meuse support
from repo_package import load_repo_package  # noqa: E402

load_repo_package()
from fieldcast.algorithms import (  # noqa: E402
    CovarianceModel,
    GridSpec,
    KrigingPredictor,
    MeanModel,
    Structure,
    Transform,
    UnconditionalGenerator,
    block_predict,
    covariance_factor,
    exceedance_probability,
    simulate_conditional,
    summarise_realisations,
)
from reference import MEUSE_LOG_ZINC, load_meuse  # noqa: E402


def _meuse_log_zinc() -> tuple[np.ndarray, np.ndarray]:
    """The Meuse sample locations and ln(zinc / ppm)."""
    meuse = load_meuse()
    return meuse.xy, np.log(meuse.zinc)


def _meuse_grid(cells_per_side: int) -> GridSpec:
    """A square-celled grid of about ``cells_per_side``^2 cells over the Meuse samples."""
    x_min, y_min, x_max, y_max = 178500.0, 329600.0, 181600.0, 333700.0
    pixel = max(x_max - x_min, y_max - y_min) / cells_per_side
    return GridSpec(x_min, y_max, pixel, cells_per_side, cells_per_side)


def _unconditional_megapixel() -> str:
    model = CovarianceModel((Structure("exponential", 1.0, 100.0, azimuth=30.0, ratio=0.5),))
    generator = UnconditionalGenerator(model, (1024, 1024), 1.0)
    field, _ = generator.draw_pair(np.random.default_rng(0))
    return f"torus {generator.padded_shape[0]} x {generator.padded_shape[1]}, field sd {field.std():.2f} (model 1)"


def _conditional_meuse_500() -> str:
    xy, values = _meuse_log_zinc()
    grid = _meuse_grid(500)
    start = time.perf_counter()
    result = simulate_conditional(xy, values, MEUSE_LOG_ZINC, MeanModel.for_data("constant", xy), grid,
                                  n_realisations=100, seed=1, transform=Transform("log"))
    simulated = time.perf_counter() - start
    summary = summarise_realisations(result.realisations, grid.pixel_size ** 2, threshold=500.0)
    share = float(np.median(summary.area_above) / summary.mask_area)
    return (f"{grid.n_cells:,} cells, realisations {simulated:.1f} s + summaries; median share above 500 ppm "
            f"{share:.2f}; {len(result.warnings)} warning(s)")


def _exceedance_and_block_meuse() -> str:
    xy, values = _meuse_log_zinc()
    grid = _meuse_grid(100)
    predictor = KrigingPredictor(xy, values, MEUSE_LOG_ZINC, MeanModel.for_data("constant", xy))
    mean, variance = block_predict(predictor, grid.cell_centres(), grid.pixel_size)
    probability = exceedance_probability(mean, variance, 500.0, transform=Transform("log"))
    return f"{grid.n_cells:,} blocks of 4 x 4 points; share of cells with P > 0.5: {np.mean(probability > 0.5):.2f}"


def _dense_cholesky(side: int) -> str:
    """Cholesky factor of a side x side lattice covariance: the cost the FFT avoids."""
    model = CovarianceModel((Structure("exponential", 1.0, 10.0),))
    rows, cols = np.meshgrid(np.arange(side), np.arange(side), indexing="ij")
    xy = np.column_stack([cols.ravel(), rows.ravel()]).astype(float)
    start = time.perf_counter()
    covariance_factor(model.cross_covariance(xy, xy))
    seconds = time.perf_counter() - start
    cells = side * side
    scaled = seconds * (1e6 / cells) ** 3
    return (f"{cells:,} cells in {seconds:.2f} s; scaled by n^3 to 10^6 cells: {scaled / 86400:,.0f} days, "
            "and 10^12 doubles = 8 TB for the matrix")


def cases() -> list[dict]:
    """The simulation benchmark cases (see tools/bench.py)."""
    return [
        {"name": "unconditional realisation, 1024 x 1024 grid", "target": "< 3 s", "seconds": 3.0,
         "memory_mb": None, "run": _unconditional_megapixel},
        {"name": "100 conditional realisations, 500 x 500 grid, Meuse n=155", "target": "< 60 s, < 2 GB",
         "seconds": 60.0, "memory_mb": 2048.0, "run": _conditional_meuse_500},
        {"name": "block kriging + exceedance, 100 x 100 grid, Meuse n=155", "target": "reported only",
         "seconds": None, "memory_mb": None, "run": _exceedance_and_block_meuse},
        {"name": "dense Cholesky of a 64 x 64 lattice (what the FFT avoids)", "target": "reported only",
         "seconds": None, "memory_mb": None, "run": lambda: _dense_cholesky(64)},
    ]


if __name__ == "__main__":
    import bench

    sys.exit(bench.main([case["name"] for case in cases()]))
