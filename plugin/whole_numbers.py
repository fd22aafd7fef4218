"""Integer parameters read exactly: Processing's own reading goes through a 32-bit int and silently wraps.

``parameterAsInt`` turns 2**31 into 0 and 4294967298 into 0 or 2; :func:`whole_number` takes the value the
user gave (a Python int, an integral float, or text as ``qgis_process`` passes it) as a Python int of any size,
or refuses it with the allowed range and the parameter's name.
"""
from __future__ import annotations

import math

from ..algorithms import FieldcastError


def _as_integer(value) -> int | None:
    """``value`` as an exact int, None when it is not a whole number."""
    if isinstance(value, bool):
        return None
    if isinstance(value, int):
        return value
    if isinstance(value, float):
        return int(value) if math.isfinite(value) and value.is_integer() else None
    if isinstance(value, str):
        text = value.strip()
        try:
            return int(text)
        except ValueError:
            try:
                return _as_integer(float(text))
            except ValueError:
                return None
    return None


def whole_number(value, name: str, low: int, high: int | None = None) -> int:
    """The whole number ``value`` of parameter ``name``, checked to lie in ``[low, high]`` (no upper limit: None).

    Raises
    ------
    FieldcastError
        Naming the parameter, the value given and the allowed range.
    """
    number = _as_integer(value)
    allowed = f"from {low:,} to {high:,}" if high is not None else f"of {low:,} or more"
    if number is None or number < low or (high is not None and number > high):
        raise FieldcastError(f"{name} must be a whole number {allowed}; got {value!r}. Set {name} to a whole "
                             f"number {allowed}.")
    return number
