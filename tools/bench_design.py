"""Benchmark cases: 50 proposed samples among 10,000 candidate places (the engine's propose_samples).

The samples are the published Meuse data (tests/data/meuse.csv, EPSG:28992) with the one Meuse log-zinc model
(tests/reference.py); the region is the samples' bounding box, its candidates a lattice of about 10,000 points
and the criterion's evaluation points a lattice of about 2,000 (what the toolbox takes for 10,000 candidates).
"""
from __future__ import annotations

import sys
import time
from functools import partial
from pathlib import Path

import numpy as np
from osgeo import ogr

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))  # the repository loader, Meuse support
from repo_package import load_repo_package  # noqa: E402

load_repo_package()
from fieldcast.algorithms import KrigingPredictor, MeanModel, Region, propose_samples  # noqa: E402
from reference import MEUSE_LOG_ZINC, load_meuse  # noqa: E402

PROPOSALS = 50
CANDIDATES = 10_000
EVALUATION = 2_000


def _propose(criterion: str) -> str:
    meuse = load_meuse()
    (x_min, y_min), (x_max, y_max) = meuse.xy.min(axis=0), meuse.xy.max(axis=0)
    ring = f"POLYGON(({x_min} {y_min},{x_max} {y_min},{x_max} {y_max},{x_min} {y_max},{x_min} {y_min}))"
    region = Region.from_shapes([ogr.CreateGeometryFromWkt(ring).ExportToWkb()])
    candidates, _ = region.lattice(CANDIDATES)
    evaluation, _ = region.lattice(EVALUATION)
    start = time.perf_counter()
    predictor = KrigingPredictor(meuse.xy, np.log(meuse.zinc), MEUSE_LOG_ZINC, MeanModel())
    proposal = propose_samples(predictor, evaluation, candidates, PROPOSALS, criterion=criterion,
                               level=float(np.log(500.0)))
    seconds = time.perf_counter() - start
    return (f"{PROPOSALS} proposals among {len(candidates):,} candidates, {len(evaluation):,} evaluation points, "
            f"in {seconds:.1f} s; criterion {proposal.before:.4g} -> {proposal.after[-1]:.4g}")


def cases() -> list[dict]:
    """The sampling-design benchmark cases (see tools/bench.py)."""
    return [
        {"name": "proposesamples engine, variance, 50 proposals among 10^4 candidates", "target": "< 15 s",
         "seconds": 15.0, "memory_mb": 1024.0, "run": partial(_propose, "variance")},
        {"name": "proposesamples engine, classification, 50 proposals among 10^4 candidates", "target": "reported",
         "seconds": None, "memory_mb": 1024.0, "run": partial(_propose, "classification")},
    ]
