"""Benchmark cases for the engine: likelihood fitting and kriging prediction.

Targets come from the engine issue; scikit-learn's GaussianProcessRegressor
runs on the same data and kernel as an outside yardstick.
"""
from __future__ import annotations

import time

import numpy as np
from engine import REPO_ROOT, load_engine

load_engine()
from fieldcast_engine.covariance import CovarianceModel, Structure  # noqa: E402
from fieldcast_engine.fitting import fit_model  # noqa: E402
from fieldcast_engine.kriging import KrigingPredictor  # noqa: E402
from fieldcast_engine.mean import MeanModel  # noqa: E402


def _meuse_log_zinc() -> tuple[np.ndarray, np.ndarray]:
    table = np.genfromtxt(REPO_ROOT / "tests" / "data" / "meuse.csv", delimiter=",", names=True)
    return np.column_stack([table["x"], table["y"]]), np.log(table["zinc"])


def _simulated(n: int, anisotropic: bool, seed: int = 7) -> tuple[np.ndarray, np.ndarray]:
    """A field drawn from a known model at n random sites in a 10 km square."""
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0.0, 10_000.0, size=(n, 2))
    structure = Structure("exponential", 1.0, 1500.0, 30.0 if anisotropic else 0.0, 0.5 if anisotropic else 1.0)
    model = CovarianceModel((structure,), 0.1)
    factor = np.linalg.cholesky(model.data_covariance(xy))
    return xy, 5.0 + factor @ rng.standard_normal(n)


def _fit(xy: np.ndarray, values: np.ndarray, anisotropic: bool, kernel: str = "spherical") -> str:
    result = fit_model(xy, values, kernel=kernel, anisotropy=anisotropic, mean="constant", method="reml")
    s = result.covariance.structures[0]
    return f"range {s.range:.0f}, azimuth {s.azimuth:.0f}, ratio {s.ratio:.2f}"


def _predict_million() -> str:
    xy, values = _simulated(1000, anisotropic=False)
    model = CovarianceModel((Structure("exponential", 1.0, 1500.0),), 0.1)
    predictor = KrigingPredictor(xy, values, model, MeanModel.for_data("constant", xy))
    side = np.linspace(0.0, 10_000.0, 1000)
    gx, gy = np.meshgrid(side, side)
    mean, variance = predictor.predict(np.column_stack([gx.ravel(), gy.ravel()]))
    return f"{mean.size:,} locations, max variance {variance.max():.3f}"


def _versus_scikit_learn(n: int) -> tuple[str, bool]:
    """Fit and predict an isotropic Matérn 3/2 plus noise with both; report time ratios and agreement.

    Met when our fit takes at most half of scikit-learn's time and our prediction no longer than its.
    """
    from sklearn.gaussian_process import GaussianProcessRegressor
    from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel

    xy, values = _simulated(n, anisotropic=False)
    centred = values - values.mean()
    start = time.perf_counter()
    ours = fit_model(xy, centred, kernel="matern32", anisotropy=False, mean="known", method="ml")
    ours_fit = time.perf_counter() - start
    kernel = ConstantKernel(1.0, (1e-3, 1e3)) * Matern(1000.0, (10.0, 1e5), nu=1.5) + WhiteKernel(0.1, (1e-6, 10.0))
    start = time.perf_counter()
    reference = GaussianProcessRegressor(kernel, normalize_y=False, n_restarts_optimizer=0).fit(xy, centred)
    theirs_fit = time.perf_counter() - start
    grid = np.random.default_rng(1).uniform(0.0, 10_000.0, size=(20_000, 2))
    start = time.perf_counter()
    ours_mean, _ = KrigingPredictor(xy, centred, ours.covariance, ours.mean).predict(grid)
    ours_predict = time.perf_counter() - start
    start = time.perf_counter()
    theirs_mean, _ = reference.predict(grid, return_std=True)
    theirs_predict = time.perf_counter() - start
    spread = float(np.max(np.abs(ours_mean - theirs_mean)) / np.std(centred))
    fit_ratio, predict_ratio = ours_fit / theirs_fit, ours_predict / theirs_predict
    note = (f"fit time ours/sklearn {fit_ratio:.2f} (target <= 0.5); predict time ours/sklearn "
            f"{predict_ratio:.2f} (target <= 1); max mean difference {spread:.3f} sd")
    return note, fit_ratio <= 0.5 and predict_ratio <= 1.0


def cases() -> list[dict]:
    """The engine benchmark cases (see tools/bench.py)."""
    return [
        {"name": "REML fit, Meuse n=155, anisotropic spherical", "target": "< 1 s", "seconds": 1.0,
         "memory_mb": None, "run": lambda: _fit(*_meuse_log_zinc(), anisotropic=True)},
        {"name": "REML fit, n=1000, isotropic", "target": "< 5 s", "seconds": 5.0, "memory_mb": None,
         "run": lambda: _fit(*_simulated(1000, anisotropic=False), anisotropic=False, kernel="exponential")},
        {"name": "REML fit, n=2000, anisotropic", "target": "< 30 s", "seconds": 30.0, "memory_mb": None,
         "run": lambda: _fit(*_simulated(2000, anisotropic=True), anisotropic=True, kernel="exponential")},
        {"name": "predict with variance, n=1000 to 10^6 locations", "target": "< 60 s, < 2 GB",
         "seconds": 60.0, "memory_mb": 2048.0, "run": _predict_million},
        {"name": "side by side with scikit-learn, n=1000", "target": "fit <= 0.5x, predict <= 1x",
         "seconds": None, "memory_mb": None, "run": lambda: _versus_scikit_learn(1000)},
    ]
