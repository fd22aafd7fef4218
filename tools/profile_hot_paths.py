"""Profile the engine's hot paths with pyinstrument and print where the time goes.

Run ``.venv/bin/python tools/profile_hot_paths.py`` (``make profile``). Three paths:
a REML fit of 1,000 samples, kriging with variance from 1,000 samples to 200,000
locations, and local kriging from 20,000 samples to 100,000 locations. The
README's performance section summarises the output.
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
from pyinstrument import Profiler

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))  # the repository loader, Meuse support
from repo_package import load_repo_package  # noqa: E402

load_repo_package()
from fieldcast.algorithms import (  # noqa: E402
    CovarianceModel,
    KrigingPredictor,
    LocalKrigingPredictor,
    MeanModel,
    Structure,
    fit_model,
)

MODEL = CovarianceModel((Structure("exponential", 1.0, 1500.0, 30.0, 0.5),), 0.1)


def samples(n: int, seed: int = 7) -> tuple[np.ndarray, np.ndarray]:
    """``n`` sites in a 10 km square with values from a smooth test surface plus noise."""
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0.0, 10_000.0, size=(n, 2))
    return xy, np.sin(xy[:, 0] / 1500.0) + np.cos(xy[:, 1] / 2500.0) + 0.3 * rng.standard_normal(n)


def targets(m: int) -> np.ndarray:
    """``m`` prediction locations in the same square."""
    return np.random.default_rng(1).uniform(0.0, 10_000.0, size=(m, 2))


def profile(title: str, work) -> None:
    """Run ``work`` under pyinstrument and print its call tree, trimmed to the frames that matter."""
    profiler = Profiler(interval=0.005)
    profiler.start()
    work()
    profiler.stop()
    print(f"===== {title}")
    print(profiler.output_text(unicode=False, color=False, show_all=False))


def main() -> None:
    xy, values = samples(1000)
    mean = MeanModel.for_data("constant", xy)
    profile("REML fit, n = 1,000, isotropic exponential",
            lambda: fit_model(xy, values, kernel="exponential", anisotropy=False))
    profile("kriging with variance, n = 1,000 to 200,000 locations",
            lambda: KrigingPredictor(xy, values, MODEL, mean).predict(targets(200_000)))
    many_xy, many_values = samples(20_000)
    profile("local kriging, n = 20,000, 32 neighbours, 100,000 locations",
            lambda: LocalKrigingPredictor(many_xy, many_values, MODEL, MeanModel.for_data("constant", many_xy),
                                          neighbours=32).predict(targets(100_000)))


if __name__ == "__main__":
    main()
