"""The knots of a normal-score transform: a (weighted) empirical distribution matched to the standard normal.

Each distinct attribute value ``z_k`` (sorted) gets the score ``y_k = Phi^-1(p_k)`` where ``p_k`` is the
midpoint of its step of the empirical distribution function, ``p_k = W_{k-1} + w_k / 2`` (``w_k`` the weight
of the value, normalised to sum 1; ``W`` the running sum) — equal weights unless declustering weights are
given (the normal-score transform with declustering weights as Deutsch & Journel 1998 describe it). Between
knots the transform is linear in ``(z, y)``, both ways.

Tails (stated, our choice): one more knot on each side, at the score ``y = -/+ TAIL_SCORE`` (or one unit
beyond the most extreme data score, if that is further out), joined linearly to the extreme data knots.
Its value is the lower bound ``z_min - r / 10`` (for positive data no lower than ``z_min / 2``) and the
upper bound ``z_max + r / 10``, ``r = z_max - z_min`` the data range. Beyond the tail knots the transform
is constant: values outside the bounds get the tail scores, scores beyond the tail scores get the bounds.
"""
from __future__ import annotations

import numpy as np
from scipy import stats

from ..errors import FieldcastError

TAIL_SCORE = 5.0
"""Normal score of the tail knots (at least; see the module notes)."""
TAIL_FRACTION = 0.1
"""How far the bounds lie beyond the data, as a fraction of the data range."""
TAILS_WORDS = (f"linear in the tails to bounds one tenth of the data range beyond the data (for positive data no "
               f"lower than half the smallest value), reached at normal scores -/+{TAIL_SCORE:g}; constant beyond")
"""The tail rule in words, for the model file and the log."""


def score_knots(values: np.ndarray, weights: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Knots ``(z, y)`` of the normal-score transform of ``values``, tail knots included.

    Parameters
    ----------
    values : ndarray of shape (n,)
        Attribute values (finite), attribute units.
    weights : ndarray of shape (n,), optional
        Declustering weights (positive); equal weights when None.

    Returns
    -------
    z, y : ndarray
        Strictly increasing attribute values and their normal scores, the first and last the tail knots.

    Raises
    ------
    FieldcastError
        If fewer than two distinct values are given, or a value is not finite.
    """
    values = np.asarray(values, dtype=float)
    if not np.all(np.isfinite(values)):
        raise FieldcastError("The normal-score transform needs finite values; drop or fill the NaN or infinite "
                             "ones, or choose another transform.")
    weights = np.ones(len(values)) if weights is None else np.asarray(weights, dtype=float)
    distinct, inverse = np.unique(values, return_inverse=True)
    if len(distinct) < 2:
        raise FieldcastError("The normal-score transform needs at least two different values; choose another "
                             "field or no transform.")
    step = np.bincount(inverse.ravel(), weights=weights, minlength=len(distinct))
    step = step / step.sum()
    scores = stats.norm.ppf(np.cumsum(step) - 0.5 * step)
    tail = max(TAIL_SCORE, float(np.max(np.abs(scores))) + 1.0)
    low, high = float(distinct[0]), float(distinct[-1])
    spread = TAIL_FRACTION * (high - low)
    lower = max(low - spread, 0.5 * low) if low > 0 else low - spread
    return np.concatenate([[lower], distinct, [high + spread]]), np.concatenate([[-tail], scores, [tail]])


def checked_knots(z: np.ndarray, y: np.ndarray) -> None:
    """Refuse knots that do not make a monotone transform (a programming or file error).

    Raises
    ------
    FieldcastError
        If the arrays differ in length, hold fewer than three knots, a non-finite number, or do not increase.
    """
    if len(z) != len(y) or len(z) < 3 or not (np.all(np.isfinite(z)) and np.all(np.isfinite(y))):
        raise FieldcastError("The normal-score knots must be at least three finite (value, score) pairs; refit the "
                             "model with 'Fit covariance model'.")
    if np.any(np.diff(z) <= 0) or np.any(np.diff(y) <= 0):
        raise FieldcastError("The normal-score knots must increase in both value and score; refit the model with "
                             "'Fit covariance model'.")
