"""The accuracy/time curve of the Vecchia likelihood's conditioning-set size (LIKELIHOOD_NEIGHBOURS).

Run ``.venv/bin/python tools/vecchia_neighbours_curve.py``. For each size ``m`` it prints the Kullback-Leibler
divergence of the Vecchia law from the exact one (``algorithms/fit/vecchia_accuracy.py``: the mean loss of
log-likelihood, with the spread of the log-likelihood gap) at 2,000 samples of a 40 x 50 window of the
invented gap case's lattice (tests/cloud_gaps.py) for a one-structure and its two-structure model, and the seconds
of one Vecchia log-likelihood evaluation (ordering and conditioning sets included) at 10,000 samples (a 100 x 100
window). DEVELOPERS.md holds the curve that chose :data:`DEFAULT_NEIGHBOURS`.
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))  # the repository loader, the gap case
from repo_package import load_repo_package  # noqa: E402

load_repo_package()
from cloud_gaps import true_covariance  # noqa: E402
from fieldcast.algorithms import (  # noqa: E402
    CovarianceModel,
    MeanModel,
    Structure,
    VecchiaPlan,
    vecchia_divergence,
    vecchia_log_likelihood,
)

SIZES = (10, 15, 20, 25, 30, 40, 50)
MODELS = {"one structure (matern32, range 40)": CovarianceModel((Structure("matern32", 1.0, 40.0),), 0.05),
          "two structures (gap case)": true_covariance((300, 500))}


def window(rows: int, cols: int) -> np.ndarray:
    """Cell centres of a ``rows x cols`` window of the unit lattice."""
    r, c = np.divmod(np.arange(rows * cols), cols)
    return np.column_stack([c + 0.5, r + 0.5]).astype(float)


def main() -> None:
    small, large = window(40, 50), window(100, 100)
    values = np.random.default_rng(0).standard_normal(len(large))
    two = MODELS["two structures (gap case)"]
    mean = MeanModel.for_data("constant", large)
    vecchia_log_likelihood(large, values, two, mean, neighbours=SIZES[0])  # warm-up (imports, caches)
    print("m | " + " | ".join(f"KL ± sd, {name}" for name in MODELS) +
          " | s for ordering and sets, n = 10,000 | s per evaluation (sets included)")
    for m in SIZES:
        cells = []
        for model in MODELS.values():
            terms = vecchia_divergence(small, model, VecchiaPlan.build(small, m))
            cells.append(f"{terms.divergence:.2f} ± {terms.spread:.2f}")
        start = time.perf_counter()
        VecchiaPlan.build(large, m)
        planned = time.perf_counter()
        vecchia_log_likelihood(large, values, two, mean, neighbours=m)
        done = time.perf_counter()
        print(f"{m} | " + " | ".join(cells) + f" | {planned - start:.2f} | {done - planned:.2f}")


if __name__ == "__main__":
    main()
