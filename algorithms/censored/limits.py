"""Values below a limit as the samples give them: text entries such as "<0.5", substitution, and the warning for
many equal smallest values.

A censored sample carries its reporting limit as its value (attribute units) and a True in the censored mask.
"""
from __future__ import annotations

import math
import re
from collections.abc import Iterable

import numpy as np

from ..errors import FieldcastError

NONDETECT_TREATMENTS = ("likelihood", "substitution")
"""How censored samples enter a fit: as inequalities in the likelihood (default), or replaced by limit x factor."""

PILE_SHARE = 0.05
PILE_COUNT = 5
"""At least :data:`PILE_COUNT` samples and :data:`PILE_SHARE` of them at the smallest value draw a warning (our own
thresholds: a handful of exact ties at the minimum is what a detection limit leaves behind)."""

_BELOW = re.compile(r"^\s*<\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*$")


def parse_limit_text(entry) -> tuple[float, bool]:
    """One attribute as ``(value, censored)``: a number, or ``"<x"`` / ``"< x"`` (limit x, censored).

    Text that is neither (and NULL) gives ``(nan, False)``: the reader skips and counts it. A decimal comma is not
    read ("<0,5" is skipped).
    """
    if entry is None:
        return math.nan, False
    if isinstance(entry, (int, float)) and not isinstance(entry, bool):
        return float(entry), False
    text = str(entry)
    match = _BELOW.match(text)
    if match:
        return float(match.group(1)), True
    try:
        return float(text), False
    except ValueError:
        return math.nan, False


def parse_limit_texts(entries: Iterable) -> tuple[np.ndarray, np.ndarray]:
    """:func:`parse_limit_text` of every entry: values (float array) and the censored mask."""
    pairs = [parse_limit_text(entry) for entry in entries]
    values = np.array([value for value, _ in pairs], dtype=float)
    return values, np.array([flag for _, flag in pairs], dtype=bool)


def check_factor(factor: float) -> None:
    """Refuse a substitution factor outside (0, 1], naming SUBSTITUTION_FACTOR."""
    if not (math.isfinite(factor) and 0.0 < factor <= 1.0):
        raise FieldcastError(f"The substitution factor (SUBSTITUTION_FACTOR) must be above 0 and at most 1; got "
                             f"{factor:g}. Give e.g. 0.5 for half the limit.")


def substituted(values: np.ndarray, censored: np.ndarray, factor: float) -> np.ndarray:
    """The values with each limit replaced by ``factor`` times it (attribute units; a new array)."""
    check_factor(factor)
    out = np.array(values, dtype=float)
    out[np.asarray(censored, dtype=bool)] *= factor
    return out


def check_limits(values: np.ndarray, censored: np.ndarray, field: str) -> None:
    """Refuse a censored sample whose limit is not a positive number (a limit of 0 or less bounds nothing a
    concentration can take), naming the field."""
    limits = np.asarray(values, dtype=float)[np.asarray(censored, dtype=bool)]
    bad = limits[~(limits > 0)]
    if len(bad):
        raise FieldcastError(f"{len(bad)} sample(s) marked below a limit have a limit of {bad[0]:g} in {field}; a "
                             "limit must be above 0. Correct those values, or clear their BELOW_LIMIT_FIELD mark.")


def minimum_pile_warning(values: np.ndarray, censored: np.ndarray, field: str) -> str | None:
    """A warning when many values equal the smallest of them (perhaps unmarked limits), else None; None as well
    when some values are marked as limits (the user has said which values are limits)."""
    if np.any(censored):
        return None
    detected = np.asarray(values, dtype=float)
    smallest = float(detected.min())
    count = int(np.count_nonzero(detected == smallest))
    if count < PILE_COUNT or count < PILE_SHARE * len(detected):
        return None
    return (f"{count} of {len(detected)} values of {field} equal its smallest value {smallest:g}. If these are "
            "values below a detection limit, give a field that marks them in BELOW_LIMIT_FIELD (or write them as "
            f"\"<{smallest:g}\" in a text value field), so the fit treats them as limits instead of values.")


def censoring_words(summary: dict) -> str:
    """The model file's ``fit["censored"]`` in words, for the log and the report."""
    how = {"likelihood": "kept as limits in the likelihood (stochastic EM"
                         + (f", {summary.get('iterations')} iterations, {summary.get('imputations')} imputations, "
                            f"seed {summary.get('seed')})" if "iterations" in summary else ")"),
           "substitution": f"replaced by {summary.get('factor', 0.5):g} times their limit (substitution)"}
    return (f"Values below a limit: {summary['count']} of {summary['samples']} samples, "
            f"{how.get(summary['treatment'], summary['treatment'])}.")
