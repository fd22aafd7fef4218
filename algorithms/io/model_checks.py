"""Checks of a model-file document before it is rebuilt into model objects.

Every key a later step reads is checked for presence, type, finiteness and
range, so a hand-edited or damaged file is refused with the key path (e.g.
``structures[0].azimuth``) and the value that is wrong, instead of crashing
or quietly producing a constant or empty map. JSON's ``NaN`` and
``Infinity`` literals arrive as non-finite floats and are refused here.
"""
from __future__ import annotations

import json
import math
from collections.abc import Callable
from typing import Any

import numpy as np

from ..errors import FieldcastError
from ..model.correlation import FAMILIES, SMOOTHNESS_BOUNDS
from ..model.covariance import MAX_SILL
from ..model.mean import MEAN_KINDS
from ..model.transform import LAMBDA_LIMIT, TRANSFORM_KINDS
from .covariates import COVARIATE_KINDS

ADVICE = "Refit the model with 'Fit covariance model', or correct the file."

_MISSING = object()


def shown(value: Any) -> str:
    """``value`` as the file would spell it (``nan`` and ``inf`` for non-finite numbers)."""
    if isinstance(value, float):
        return repr(value)
    text = json.dumps(value, allow_nan=True)
    return text if len(text) <= 60 else text[:57] + "..."


class DocumentCheck:
    """Reads checked values out of a model-file document, refusing with the key path.

    Parameters
    ----------
    source : str
        How messages name the file, e.g. ``"The model file zinc.json"``.
    """

    def __init__(self, source: str) -> None:
        self.source = source

    def refuse(self, path: str, value: Any, requirement: str) -> FieldcastError:
        """The error for ``path`` holding ``value`` (``_MISSING`` when the key is absent)."""
        if value is _MISSING:
            return FieldcastError(f"{self.source} has no {path}; it must be {requirement}. {ADVICE}")
        return FieldcastError(f"{self.source} has {path} = {shown(value)}; it must be {requirement}. {ADVICE}")

    def value(self, data: dict, key: str, prefix: str, requirement: str, test: Callable[[Any], bool],
              default: Any = _MISSING) -> Any:
        """``data[key]`` when ``test`` accepts it; ``default`` when absent and a default is given."""
        path = f"{prefix}{key}"
        item = data.get(key, default)
        if item is _MISSING or not test(item):
            raise self.refuse(path, item, requirement)
        return item

    def number(self, data: dict, key: str, prefix: str, requirement: str,
               test: Callable[[float], bool] = lambda v: True, default: Any = _MISSING) -> float:
        """A finite number ``data[key]`` (not a boolean) that ``test`` accepts."""
        def accepted(item: Any) -> bool:
            return is_number(item) and math.isfinite(item) and test(item)
        return float(self.value(data, key, prefix, f"a finite number{requirement}", accepted, default))

    def mapping(self, data: dict, key: str, default: Any = _MISSING) -> dict:
        """The object ``data[key]`` of the top level."""
        return self.value(data, key, "", "an object ({...})", lambda item: isinstance(item, dict), default)

    def text(self, data: dict, key: str, prefix: str = "", choices: tuple[str, ...] = (),
             default: Any = _MISSING) -> str:
        """The string ``data[key]``, one of ``choices`` when they are given."""
        if choices:
            return self.value(data, key, prefix, f"one of {', '.join(map(json.dumps, choices))}",
                              lambda item: item in choices, default)
        return self.value(data, key, prefix, "a text string", lambda item: isinstance(item, str), default)


def is_number(value: Any) -> bool:
    """True for a JSON number (int or float, not a boolean)."""
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def check_document(data: dict, source: str, newest_version: int) -> None:
    """Refuse ``data`` unless every part a later step reads is present and usable.

    Parameters
    ----------
    data : dict
        The parsed document, already known to name the Fieldcast format.
    source : str
        How messages name the file.
    newest_version : int
        Highest ``format_version`` this plugin reads.

    Raises
    ------
    FieldcastError
        Naming the key path, its value and what it must be.
    """
    check = DocumentCheck(source)
    version = check.value(data, "format_version", "", "a whole number of 1 or more",
                          lambda item: isinstance(item, int) and not isinstance(item, bool) and item >= 1)
    if version > newest_version:
        raise FieldcastError(f"{source} has format version {version}, newer than this plugin reads "
                             f"({newest_version}). Update Fieldcast or refit the model.")
    check.text(data, "field", default="")
    check.text(data, "crs")
    check.text(data, "units")
    check.mapping(data, "fit", default={})
    check_covariance(check, data)
    check_mean(check, check.mapping(data, "mean"))
    transform = check.mapping(data, "transform")
    kind = check.text(transform, "kind", "transform.", TRANSFORM_KINDS, default="none")
    check.number(transform, "offset", "transform.", "", default=0.0)
    if kind == "boxcox":
        check.number(transform, "lambda", "transform.", f" between {-LAMBDA_LIMIT:g} and {LAMBDA_LIMIT:g}",
                     lambda v: abs(v) <= LAMBDA_LIMIT)
    if kind == "normalscore":
        check.value(transform, "knots", "transform.", "a list of at least three [value, score] pairs of finite "
                    "numbers, both increasing", knots_usable)


def knots_usable(item: Any) -> bool:
    """Whether ``item`` is a usable list of normal-score knots ``[[z, y], ...]``."""
    if not isinstance(item, list) or len(item) < 3 or not all(
            isinstance(pair, list) and len(pair) == 2 and all(is_number(v) and math.isfinite(v) for v in pair)
            for pair in item):
        return False
    table = np.array(item, dtype=float)
    return bool(np.all(np.diff(table, axis=0) > 0))


def check_covariance(check: DocumentCheck, data: dict) -> None:
    """Check the nugget, the one or two structures and the total sill."""
    nugget = check.number(data, "nugget", "", " of 0 or more", lambda v: v >= 0)
    structures = check.value(data, "structures", "", "a list of one or two structures",
                             lambda item: isinstance(item, list) and 1 <= len(item) <= 2)
    sills = {"nugget": nugget}
    for k, structure in enumerate(structures):
        prefix = f"structures[{k}]."
        if not isinstance(structure, dict):
            raise check.refuse(f"structures[{k}]", structure, "an object ({...}) describing a structure")
        sills[f"{prefix}partial_sill"] = check_structure(check, structure, prefix)
    total = sum(sills.values())
    if not 0 < total <= MAX_SILL:
        largest = max(sills, key=sills.get)
        raise check.refuse(largest, sills[largest], f"such that the nugget plus the partial sills (now {total!r}) "
                                                    f"is above 0 and at most {MAX_SILL:g}")


def check_structure(check: DocumentCheck, data: dict, prefix: str) -> float:
    """Check one structure; return its partial sill."""
    family = check.text(data, "family", prefix, FAMILIES)
    check.number(data, "range", prefix, " above 0 (a distance in CRS units)", lambda v: v > 0)
    check.number(data, "azimuth", prefix, " of degrees", default=0.0)
    check.number(data, "ratio", prefix, " above 0 and at most 1", lambda v: 0 < v <= 1, default=1.0)
    if family == "matern":
        low, high = SMOOTHNESS_BOUNDS
        check.number(data, "smoothness", prefix, f" from {low} to {high} for the matern family",
                     lambda v: low <= v <= high)
    else:
        check.value(data, "smoothness", prefix, f"null for the {family} family", lambda item: item is None,
                    default=None)
    return check.number(data, "partial_sill", prefix, " of 0 or more", lambda v: v >= 0)


def check_mean(check: DocumentCheck, data: dict) -> None:
    """Check the mean model: kind, known value, trend frame, covariates and coefficients."""
    check.text(data, "kind", "mean.", MEAN_KINDS)
    check.number(data, "known_value", "mean.", "", default=0.0)
    check.value(data, "origin", "mean.", "a list of two finite numbers (easting, northing)",
                lambda item: isinstance(item, list) and len(item) == 2
                and all(is_number(v) and math.isfinite(v) for v in item), default=[0.0, 0.0])
    check.number(data, "scale", "mean.", " above 0 (a distance in CRS units)", lambda v: v > 0, default=1.0)
    check.value(data, "covariates", "mean.", "a list of field names",
                lambda item: isinstance(item, list) and all(isinstance(v, str) for v in item), default=[])
    for key in ("coefficients", "standard_errors"):
        check.value(data, key, "mean.", "a list of finite numbers",
                    lambda item: isinstance(item, list) and all(is_number(v) and math.isfinite(v) for v in item),
                    default=[])
    rasters = check.value(data, "covariate_rasters", "mean.", "a list of covariate descriptions",
                          lambda item: isinstance(item, list), default=[])
    for k, raster in enumerate(rasters):
        check_covariate(check, raster, f"mean.covariate_rasters[{k}]")


def check_covariate(check: DocumentCheck, data: Any, path: str) -> None:
    """Check one covariate: name, kind, source and, for a class covariate, its classes and baseline."""
    if not isinstance(data, dict):
        raise check.refuse(path, data, "an object ({...}) describing a covariate")
    prefix = f"{path}."
    check.text(data, "name", prefix)
    check.text(data, "source", prefix, default="")
    if check.text(data, "kind", prefix, COVARIATE_KINDS) == "class":
        classes = check.value(data, "classes", prefix, "a list of two or more distinct finite class values",
                              lambda item: isinstance(item, list) and len(set(item)) == len(item) >= 2
                              and all(is_number(v) and math.isfinite(v) for v in item))
        check.value(data, "baseline", prefix, "one of the classes", lambda item: item in classes)
