"""Benchmark case: the engine's per-polygon assessment, 1,000 polygons on 10,000 samples.

Invented data for the benchmark only: 10,000 samples uniform over a 10 km square with a smooth log-scale
surface plus noise (fixed seed), a spherical model, and 1,000 square units of 40-120 m on a side, scattered
over the square; a log model, so each unit is also drawn 1,000 times.
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
from osgeo import ogr

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))  # the repository loader
from repo_package import load_repo_package  # noqa: E402

load_repo_package()
from fieldcast.algorithms import CovarianceModel, MeanModel, Structure, Transform, assess_areas  # noqa: E402

SAMPLES = 10_000
POLYGONS = 1_000
SIDE = 10_000.0


def square(x: float, y: float, half: float) -> bytes:
    ring = f"{x - half} {y - half}, {x + half} {y - half}, {x + half} {y + half}, {x - half} {y + half}"
    return bytes(ogr.CreateGeometryFromWkt(f"POLYGON (({ring}, {x - half} {y - half}))").ExportToWkb())


def _thousand_polygons() -> str:
    rng = np.random.default_rng(5)
    xy = rng.random((SAMPLES, 2)) * SIDE
    values = 5.0 + np.sin(xy[:, 0] / 900.0) + np.cos(xy[:, 1] / 1300.0) + 0.3 * rng.standard_normal(SAMPLES)
    model = CovarianceModel((Structure("spherical", 0.6, 1500.0),), nugget=0.09)
    centres = 200.0 + rng.random((POLYGONS, 2)) * (SIDE - 400.0)
    polygons = [square(x, y, half) for (x, y), half in zip(centres, rng.uniform(20.0, 60.0, POLYGONS))]
    start = time.perf_counter()
    result = assess_areas(xy, values, model, MeanModel("constant"), Transform("log"), polygons, 150.0,
                          realisations=1000, seed=1, depths=0.5)
    seconds = time.perf_counter() - start
    done = int(np.count_nonzero(np.isfinite(result.values["mean"])))
    return f"{done:,} polygons assessed in {seconds:.1f} s ({int(np.median(result.points))} points each at the median)"


def cases() -> list[dict]:
    """The per-polygon assessment benchmark case (see tools/bench.py)."""
    return [
        {"name": "assessareas engine, 1,000 polygons on 10,000 samples (log model, 1,000 draws)",
         "target": "< 60 s, < 1 GB", "seconds": 60.0, "memory_mb": 1024.0, "run": _thousand_polygons},
    ]
