"""Probability that the attribute exceeds a threshold, from the kriging mean and variance.

Under the Gaussian model the quantity at a cell, given the data, is normal with the
kriging mean ``mu`` and error variance ``s2`` (modelling scale), so::

    P(Z(x) > t) = 1 - Phi((t' - mu) / s),    t' = forward(t)

with ``Phi`` the standard normal distribution function. A log-transformed model is
lognormal in the original scale; because the transform is increasing,
``Z > t`` exactly when ``ln(Z + offset) > ln(t + offset)``, so the threshold is
transformed the same way as the data. Where ``s = 0`` (a datum without nugget) the
probability is 1 above the threshold and 0 otherwise.

Which variance: by default (``target="field"``) ``s2`` is the variance of the
latent field's prediction error — the probability that the field itself exceeds
the threshold, which is what a map of contamination above a limit asks. With
``target="measurement"`` the nugget is added: the probability that a new
measurement at the cell (with its measurement error) exceeds the threshold.
For block support, pass the block kriging mean and variance (:mod:`.block`).
"""
from __future__ import annotations

import numpy as np
from scipy import stats

from ..errors import FieldcastError
from ..model.transform import Transform

EXCEEDANCE_TARGETS = ("field", "measurement")
"""What exceeds the threshold: the latent field, or a new measurement (nugget added)."""


def exceedance_probability(mean: np.ndarray, variance: np.ndarray, threshold: float, *,
                           transform: Transform | None = None, target: str = "field",
                           nugget: float = 0.0) -> np.ndarray:
    """``P(Z(x) > threshold)`` per cell under the Gaussian model.

    Parameters
    ----------
    mean, variance : ndarray
        Kriging mean and latent-field error variance in the modelling scale (as
        ``KrigingPredictor.predict(..., include_nugget=False)`` returns them).
    threshold : float
        Threshold in attribute units (original scale, before any transform).
    transform : Transform, optional
        The model's transform; the threshold goes through ``transform.forward``.
    target : str
        ``"field"`` (default) or ``"measurement"``, see the module notes.
    nugget : float
        Nugget variance (modelling scale) added when ``target == "measurement"``.

    Returns
    -------
    ndarray
        Probabilities in [0, 1], shape of ``mean``.
    """
    if target not in EXCEEDANCE_TARGETS:
        raise FieldcastError(f"Unknown exceedance target {target!r}; choose one of {', '.join(EXCEEDANCE_TARGETS)}.")
    if not np.isfinite(threshold):
        raise FieldcastError(f"The threshold must be a finite number; got {threshold!r}.")
    mean = np.asarray(mean, dtype=float)
    variance = np.clip(np.asarray(variance, dtype=float), 0.0, None)
    if target == "measurement":
        variance = variance + float(nugget)
    transform = Transform() if transform is None else transform
    if transform.positive_only and threshold + transform.offset <= 0:
        # Z + offset > 0 always, so every cell exceeds a threshold at or below -offset.
        return np.ones_like(mean)
    level = float(transform.forward(np.array([threshold]))[0])
    deviation = np.sqrt(variance)
    positive = deviation > 0
    scaled = np.divide(level - mean, deviation, out=np.zeros_like(mean), where=positive)
    return np.where(positive, stats.norm.sf(scaled), (mean > level).astype(float))
