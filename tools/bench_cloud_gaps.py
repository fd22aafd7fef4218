"""Benchmark of the invented satellite-like gap case (tests/cloud_gaps.py) at full size: fit, then fill the gaps.

The 300 x 500 lattice of a two-scale Matérn field plus linear trend and nugget, about 70 % observed (about 10^5
samples). The Vecchia REML fit of the observed cells (KERNEL=auto, isotropic, linear trend; the engine compares
one and two structures on the Vecchia likelihood) is timed, then the gaps are kriged by local kriging (32
neighbours) with the fitted and with the true model, and scored against the drawn signal: RMSE ratio
(fitted / true model, target within 5 %) and the coverage of the 95 % prediction intervals (target 0.93-0.97).
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))  # the repository loader, the gap case
from repo_package import load_repo_package  # noqa: E402

load_repo_package()
from cloud_gaps import cloud_gap_case  # noqa: E402
from fieldcast.algorithms import LocalKrigingPredictor, MeanModel, fit_log_lines, fit_model  # noqa: E402

FIT_SECONDS = 180.0
Z_95 = 1.959964  # standard normal 97.5 % quantile (scipy.stats.norm.ppf(0.975))


def _scores(case, covariance, mean: MeanModel) -> tuple[float, float, float]:
    """RMSE and 95 % coverage at the gap cells of local kriging with ``covariance``, and the seconds it took."""
    seen, gaps = case.observed, case.gaps
    start = time.perf_counter()
    predictor = LocalKrigingPredictor(case.xy[seen], case.values[seen], covariance, mean, neighbours=32)
    prediction, variance = predictor.predict(case.xy[gaps])
    seconds = time.perf_counter() - start
    error = prediction - case.signal[gaps]
    return float(np.sqrt(np.mean(error ** 2))), float(np.mean(np.abs(error) <= Z_95 * np.sqrt(variance))), seconds


def _gap_filling() -> tuple[str, bool]:
    case = cloud_gap_case()
    seen = case.observed
    start = time.perf_counter()
    result = fit_model(case.xy[seen], case.values[seen], kernel="auto", anisotropy=False, mean="linear")
    fit_seconds = time.perf_counter() - start
    ours = _scores(case, result.covariance, result.mean)
    truth = _scores(case, case.covariance, MeanModel.for_data("linear", case.xy[seen]))
    ratio = ours[0] / truth[0]
    print("\n".join(fit_log_lines(result, "km")), file=sys.stderr)
    passed = fit_seconds < FIT_SECONDS and ratio <= 1.05 and 0.93 <= ours[1] <= 0.97
    return (f"n={int(seen.sum()):,}, {result.likelihood}: fit {fit_seconds:.0f} s "
            f"({len(result.covariance.structures)} structure(s), {result.covariance.structures[0].family}); gaps "
            f"{int(case.gaps.sum()):,}: RMSE fitted {ours[0]:.4f} vs true model {truth[0]:.4f} (ratio {ratio:.3f}), "
            f"95 % coverage {ours[1]:.3f} (true model {truth[1]:.3f}), kriging {ours[2]:.0f} s"), passed


def cases() -> list[dict]:
    """The gap-case benchmark (see tools/bench.py)."""
    return [{"name": "cloud gaps 300 x 500: Vecchia REML fit (auto, two scales) and gap kriging",
             "target": "fit < 180 s, RMSE within 5 % of the true model, coverage 0.93-0.97", "seconds": None,
             "memory_mb": None, "run": _gap_filling}]
