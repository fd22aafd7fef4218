"""The model file: a fitted model as a JSON document, and back.

This document is what one toolbox algorithm hands to the next (fit, then
predict, cross-validate or simulate), so every field a later step needs is
in it. See the README section "The model file" for the layout.
"""
from __future__ import annotations

import dataclasses
import json
import math
import os
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import FieldcastError, FieldcastUsageError
from ..model.covariance import CovarianceModel
from ..model.mean import MeanModel
from ..model.transform import Transform
from ..version import __version__
from .atomic import write_text_atomically
from .covariates import CovariateSet
from .model_checks import check_document

FORMAT_NAME = "fieldcast-model"
FORMAT_VERSION = 1


@dataclass
class ModelDocument:
    """A fitted model with everything needed to reuse it.

    Attributes
    ----------
    covariance : CovarianceModel
        Nugget and structures, variances in transformed-attribute units squared.
    mean : MeanModel
        The mean model (kind, frame, covariate names).
    coefficients : ndarray
        Generalised-least-squares estimates of the mean coefficients, in
        the order of ``mean.term_names`` (informative; kriging re-estimates
        them from the data it is given).
    transform : Transform
        Transform applied to the attribute before modelling.
    crs_wkt : str
        WKT of the projected CRS the distances are measured in.
    units : str
        Linear unit of that CRS (e.g. ``"metre"``).
    field : str
        Name of the attribute the model was fitted to.
    fit : dict
        Method, log-likelihood, AIC, BIC, n, warnings and other fit facts.
    covariates : CovariateSet
        The covariate rasters of the mean (name, kind, classes, baseline, source), whose design columns are
        ``mean.covariate_names``; empty for a model fitted to covariate columns given as arrays.
    standard_errors : ndarray
        Standard errors of ``coefficients`` given the covariance (empty when not computed).
    """

    covariance: CovarianceModel
    mean: MeanModel
    coefficients: np.ndarray
    transform: Transform
    crs_wkt: str
    units: str
    field: str = ""
    fit: dict = dataclasses.field(default_factory=dict)
    covariates: CovariateSet = CovariateSet()
    standard_errors: np.ndarray = dataclasses.field(default_factory=lambda: np.zeros(0))

    def __post_init__(self) -> None:
        if self.covariates.covariates and self.covariates.column_names != self.mean.covariate_names:
            raise FieldcastUsageError("The covariate set does not give the mean model's covariate columns.")

    def to_dict(self) -> dict:
        """The JSON-ready document."""
        mean = self.mean.to_dict()
        mean["terms"] = list(self.mean.term_names)
        mean["coefficients"] = [float(c) for c in np.asarray(self.coefficients, dtype=float)]
        mean["standard_errors"] = [float(c) for c in np.asarray(self.standard_errors, dtype=float)]
        mean["covariate_rasters"] = self.covariates.to_list()
        return {
            "format": FORMAT_NAME,
            "format_version": FORMAT_VERSION,
            "software_version": __version__,
            "field": self.field,
            **self.covariance.to_dict(),
            "mean": mean,
            "transform": self.transform.to_dict(),
            "crs": self.crs_wkt,
            "units": self.units,
            "fit": json_ready(self.fit),
        }

    @classmethod
    def from_dict(cls, data: dict, source: str = "The model file") -> ModelDocument:
        """Rebuild a document, refusing anything missing or malformed with the key path and its value.

        ``source`` names the file in messages (e.g. ``"The model file zinc.json"``).
        """
        if not isinstance(data, dict) or data.get("format") != FORMAT_NAME:
            raise FieldcastError(
                "This file is not a Fieldcast model file (no \"format\": \"fieldcast-model\"). "
                "Choose a file written by 'Fit covariance model'."
            )
        check_document(data, source, FORMAT_VERSION)
        try:
            covariance = CovarianceModel.from_dict(data)
            mean = MeanModel.from_dict(data["mean"])
            transform = Transform.from_dict(data["transform"])
        except FieldcastError as exc:
            raise FieldcastError(f"{source} describes an unusable model: {exc} Refit the model with 'Fit "
                                 "covariance model' and use the new file.") from exc
        coefficients = np.asarray(data["mean"].get("coefficients", []), dtype=float)
        errors = np.asarray(data["mean"].get("standard_errors", []), dtype=float)
        for name, numbers in (("coefficients", coefficients), ("standard errors", errors)):
            if numbers.size not in (0, mean.n_terms):
                raise FieldcastError(
                    f"{source} lists {numbers.size} mean {name} for a {mean.kind} mean with "
                    f"{mean.n_terms} terms. Refit the model."
                )
        covariates = CovariateSet.from_list(data["mean"].get("covariate_rasters", []))
        if covariates.covariates and covariates.column_names != mean.covariate_names:
            raise FieldcastError(
                f"{source} has mean.covariates {list(mean.covariate_names)}, but its mean.covariate_rasters give "
                f"the columns {list(covariates.column_names)}. Refit the model with 'Fit covariance model'.")
        return cls(covariance, mean, coefficients, transform, data["crs"], data["units"],
                   data.get("field", ""), dict(data.get("fit", {})), covariates, errors)

    def to_json(self) -> str:
        """The document as indented JSON text."""
        return json.dumps(self.to_dict(), indent=2, allow_nan=False)

    @classmethod
    def from_json(cls, text: str, source: str = "The model file") -> ModelDocument:
        """Parse JSON text; malformed JSON gives a clear error (``source`` names the file in messages)."""
        try:
            data = json.loads(text)
        except json.JSONDecodeError as exc:
            raise FieldcastError(
                f"{source} is not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg}). "
                "Choose a file written by 'Fit covariance model'."
            ) from exc
        return cls.from_dict(data, source)

    def save(self, path: str) -> None:
        """Write the document to ``path`` through a temporary file (never half-written)."""
        write_text_atomically(path, self.to_json(), "the model file")

    @classmethod
    def load(cls, path: str) -> ModelDocument:
        """Read a model file with a clear error when it cannot be read or is malformed.

        A byte-order mark (as some Windows editors write) is skipped; line ends may be LF or CRLF.
        """
        try:
            with open(path, encoding="utf-8-sig") as stream:
                text = stream.read()
        except (OSError, UnicodeDecodeError) as exc:
            raise FieldcastError(f"Cannot read the model file {path}: {exc}. Check the path.") from exc
        return cls.from_json(text, f"The model file {os.path.basename(path)}")


def json_ready(value: Any) -> Any:
    """``value`` as JSON-ready data: numpy arrays to lists, numpy scalars to Python, non-finite floats to None."""
    if isinstance(value, dict):
        return {str(key): json_ready(item) for key, item in value.items()}
    if isinstance(value, (list, tuple, np.ndarray)):
        return [json_ready(item) for item in value]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    return value
