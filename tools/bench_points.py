"""Benchmark case: fieldcast:predictpoints on 100,000 target points, through processing.run in this process.

The samples are the published Meuse data (tests/data/meuse.csv, EPSG:28992); the targets are 100,000 points
drawn uniformly over the samples' bounding box (fixed seed), each with a text and a real field of its own,
in a GeoPackage. The run reads, krigs and writes them in chunks, so the peak memory is QGIS's own plus
a few chunks, not a copy of the layer.
"""
from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from osgeo import ogr

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))  # the repository loader, Meuse support
from repo_package import load_repo_package  # noqa: E402

load_repo_package()
from qgis_process_support import write_point_geopackage  # noqa: E402
from qgis_support import point_layer, started_plugin  # noqa: E402
from reference import load_meuse  # noqa: E402

TARGETS = 100_000


def target_geopackage(path: Path, xy: np.ndarray) -> str:
    """A GeoPackage point layer (EPSG:28992) at ``xy`` with fields ``name`` (text) and ``depth`` (real)."""
    return write_point_geopackage(path, "targets", xy, {"name": [f"T{row}" for row in range(len(xy))],
                                                        "depth": [row / 100.0 for row in range(len(xy))]})


def _hundred_thousand_points() -> str:
    started_plugin()
    import processing

    meuse = load_meuse()
    rng = np.random.default_rng(3)
    low, high = meuse.xy.min(axis=0), meuse.xy.max(axis=0)
    with tempfile.TemporaryDirectory() as folder:
        targets = target_geopackage(Path(folder) / "targets.gpkg", low + rng.random((TARGETS, 2)) * (high - low))
        start = time.perf_counter()
        result = processing.run("fieldcast:predictpoints", {
            "INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", "TARGETS": targets,
            "THRESHOLD": 500.0, "OUTPUT": str(Path(folder) / "predicted.gpkg")})
        seconds = time.perf_counter() - start
        written = ogr.Open(result["OUTPUT"])
        count = written.GetLayer().GetFeatureCount()
    return f"{count:,} points predicted and written in {seconds:.1f} s (default fit included)"


def cases() -> list[dict]:
    """The point-prediction benchmark case (see tools/bench.py)."""
    return [
        {"name": "predictpoints, Meuse samples, 100,000 targets GeoPackage to GeoPackage", "target": "< 1 GB",
         "seconds": None, "memory_mb": 1024.0, "run": _hundred_thousand_points},
    ]
