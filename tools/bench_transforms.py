"""Benchmark cases for the Box-Cox and normal-score transforms (see tools/bench.py).

Run directly (``python tools/bench_transforms.py``) to print the table for these
cases only; ``make bench`` runs them with all others.
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))  # the repository loader, Meuse support
from repo_package import load_repo_package  # noqa: E402

load_repo_package()
from fieldcast.algorithms import FitOptions, SurfaceScale, Transform, decluster, fitted_transform  # noqa: E402
from reference import load_meuse  # noqa: E402

CELLS = 1 << 20
"""One block of :func:`write_surfaces` at most (BLOCK_CELLS)."""


def _normal_score_block() -> str:
    meuse = load_meuse()
    transform = Transform.normal_score(meuse.zinc, decluster(meuse.xy, meuse.zinc).weights)
    rng = np.random.default_rng(0)
    mean, variance = rng.normal(0.0, 0.8, CELLS), rng.uniform(0.05, 0.6, CELLS)
    layers = SurfaceScale(transform, "mean", threshold=500.0).layers(
        mean, variance, ["prediction", "variance", "sd", "lower", "upper", "exceedance"])
    return f"median of the mean map {np.median(layers['prediction']):.0f} ppm"


def _boxcox_profile_meuse() -> str:
    meuse = load_meuse()
    fitted = fitted_transform(Transform("boxcox"), meuse.xy, meuse.zinc, FitOptions(kernel="auto"))
    return f"lambda {fitted.transform.boxcox_lambda:.3f} after {len(fitted.profile)} profile fits"


def cases() -> list[dict]:
    """The transform benchmark cases (see tools/bench.py)."""
    return [
        {"name": "normal-score back-transform of one 1,048,576-cell block (mean, variance, quantiles, exceedance)",
         "target": "< 10 s, < 1 GB", "seconds": 10.0, "memory_mb": 1024.0, "run": _normal_score_block},
        {"name": "Box-Cox lambda by profile likelihood, Meuse n=155, auto family", "target": "< 60 s",
         "seconds": 60.0, "memory_mb": None, "run": _boxcox_profile_meuse},
    ]


if __name__ == "__main__":
    import bench

    sys.exit(bench.main([case["name"] for case in cases()]))
