"""Descriptive statistics and histograms shown in the reports."""
from __future__ import annotations

import math

import numpy as np


def describe(values: np.ndarray) -> dict[str, float]:
    """Count, mean, standard deviation, skewness and the five-number summary of ``values``.

    The standard deviation uses ``n - 1`` in the denominator; the skewness
    is the moment coefficient ``m3 / m2**1.5`` with ``m_k = mean((x - mean)**k)``
    (Joanes & Gill 1998, *The Statistician* 47(1), 183-189, estimator g1).
    Quartiles use linear interpolation between order statistics (numpy's
    default, Hyndman & Fan 1996 definition 7).
    """
    values = np.asarray(values, dtype=float)
    centred = values - values.mean()
    m2 = float(np.mean(centred**2))
    quartiles = np.percentile(values, [25.0, 50.0, 75.0])
    return {
        "n": int(values.size),
        "mean": float(values.mean()),
        "std": float(values.std(ddof=1)) if values.size > 1 else math.nan,
        "skewness": float(np.mean(centred**3)) / m2**1.5 if m2 > 0 else math.nan,
        "min": float(values.min()),
        "q1": float(quartiles[0]),
        "median": float(quartiles[1]),
        "q3": float(quartiles[2]),
        "max": float(values.max()),
    }


STATISTIC_LABELS = (
    ("n", "count"), ("mean", "mean"), ("std", "standard deviation"), ("skewness", "skewness"),
    ("min", "minimum"), ("q1", "lower quartile"), ("median", "median"), ("q3", "upper quartile"),
    ("max", "maximum"),
)
"""Keys of :func:`describe` with the words the reports print for them, in table order."""


def histogram(values: np.ndarray, edges: np.ndarray | str = "auto") -> dict[str, list[float]]:
    """Bin edges, counts and densities of ``values``.

    ``edges="auto"`` takes the larger number of bins of the Sturges and
    Freedman-Diaconis rules (numpy's ``histogram_bin_edges``). The density
    of a bin is ``count / (n * width)``, so the bars integrate to one.
    """
    values = np.asarray(values, dtype=float)
    counts, edges = np.histogram(values, bins=edges)
    widths = np.diff(edges)
    density = counts / (values.size * widths)
    return {"edges": edges.tolist(), "counts": counts.tolist(), "density": density.tolist()}


def standard_normal_density(z: np.ndarray) -> np.ndarray:
    """Standard normal density ``exp(-z**2 / 2) / sqrt(2 pi)``."""
    z = np.asarray(z, dtype=float)
    return np.exp(-0.5 * z * z) / math.sqrt(2.0 * math.pi)
