"""The model file (algorithms/model_file.py): JSON round trips without loss, and every refusal says what to do.

The models are invented to exercise every field of the format; nothing here is compared with outside data.
"""
from __future__ import annotations

import json
import re

import numpy as np
import pytest

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.io.model_file import FORMAT_NAME, FORMAT_VERSION, ModelDocument
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.transform import Transform

CRS_WKT = 'PROJCRS["Amersfoort / RD New",ID["EPSG",28992]]'


def nested_document() -> ModelDocument:
    """A nested Matérn (free nu) plus anisotropic spherical model, log with offset, linear mean with a covariate."""
    covariance = CovarianceModel((Structure("matern", 0.123456789012345, 87.654321, smoothness=1.2345678901),
                                  Structure("spherical", 0.5 / 3.0, 1234.5, azimuth=37.25, ratio=0.4321)),
                                 nugget=1.0 / 7.0)
    mean = MeanModel("linear", origin=(179_123.456, 331_987.654), scale=1_987.25, covariate_names=("dist",))
    return ModelDocument(covariance, mean, np.array([5.9, -0.25, 0.125, -1.0 / 3.0]), Transform("log", 2.5),
                         CRS_WKT, "metre", "zinc", {"method": "reml", "log_likelihood": -123.456789, "n": 155})


def known_mean_document() -> ModelDocument:
    covariance = CovarianceModel((Structure("matern52", 0.6, 450.0),), 0.05)
    return ModelDocument(covariance, MeanModel("known", known_value=5.75), np.zeros(0), Transform(), CRS_WKT,
                         "metre", "lead")


def assert_same(loaded: ModelDocument, original: ModelDocument) -> None:
    assert loaded.covariance == original.covariance
    assert loaded.mean == original.mean
    np.testing.assert_array_equal(loaded.coefficients, original.coefficients)
    assert loaded.transform == original.transform
    assert (loaded.crs_wkt, loaded.units, loaded.field, loaded.fit) == (
        original.crs_wkt, original.units, original.field, original.fit)


@pytest.mark.parametrize("make", [nested_document, known_mean_document])
def test_round_trip_through_a_file_is_exact(make, tmp_path):
    original = make()
    path = tmp_path / "model.json"
    original.save(str(path))
    loaded = ModelDocument.load(str(path))
    assert_same(loaded, original)
    assert loaded.to_json() == original.to_json()
    assert [p.name for p in tmp_path.iterdir()] == ["model.json"]  # no temporary file left behind


def test_the_document_names_its_format_and_every_part():
    data = json.loads(nested_document().to_json())
    assert data["format"] == FORMAT_NAME and data["format_version"] == FORMAT_VERSION
    assert data["structures"][0]["family"] == "matern" and data["structures"][0]["smoothness"] == 1.2345678901
    assert data["structures"][1]["smoothness"] is None
    assert data["mean"]["terms"][-1] == "dist" and data["mean"]["covariates"] == ["dist"]
    assert len(data["mean"]["coefficients"]) == len(data["mean"]["terms"]) == 4
    assert data["transform"] == {"kind": "log", "offset": 2.5}
    assert data["mean"]["kind"] == "linear" and data["units"] == "metre" and data["field"] == "zinc"


def test_non_finite_fit_facts_are_written_as_null():
    document = nested_document()
    document.fit = {"aic": np.float64(np.nan), "counts": np.array([1, 2]), "n": np.int64(3)}
    data = json.loads(document.to_json())  # allow_nan=False: would raise on a NaN
    assert data["fit"] == {"aic": None, "counts": [1, 2], "n": 3}


def corrupted(change) -> str:
    data = nested_document().to_dict()
    change(data)
    return json.dumps(data)


@pytest.mark.parametrize(("text", "fragments"), [
    (json.dumps({"format": "something else"}), ("not a Fieldcast model file", "'Fit covariance model'")),
    (json.dumps([1, 2]), ("not a Fieldcast model file",)),
    (corrupted(lambda d: d.update(format_version=FORMAT_VERSION + 1)),
     (f"format version {FORMAT_VERSION + 1}, newer than this plugin reads ({FORMAT_VERSION})",
      "Update Fieldcast or refit")),
    (corrupted(lambda d: d["mean"].update(coefficients=[1.0, 2.0])),
     ("lists 2 mean coefficients for a linear mean with 4 terms", "Refit the model")),
    (corrupted(lambda d: d.pop("transform")), ("malformed (KeyError: 'transform')", "Refit the model")),
    (corrupted(lambda d: d.pop("crs")), ("malformed (KeyError: 'crs')", "Refit the model")),
    (corrupted(lambda d: d.pop("structures")), ("malformed (KeyError: 'structures')",)),
    (corrupted(lambda d: d["structures"][0].update(range="far")), ("malformed (ValueError",)),
    # A range must be positive (a distance; algorithms/model/covariance.py); the file's own value is named.
    (corrupted(lambda d: d["structures"][0].update(range=-5.0)),
     ("unusable model: The range of a covariance structure", "got -5.0", "Refit the model")),
    (corrupted(lambda d: d["transform"].update(kind="cube")), ("unusable model: Unknown transform", "Refit the model")),
    ('{"format": "fieldcast-model",\n "mean": }', ("not valid JSON (line 2, column", "'Fit covariance model'")),
])
def test_bad_documents_are_refused_with_advice(text, fragments):
    with pytest.raises(FieldcastError) as error:
        ModelDocument.from_json(text)
    for fragment in fragments:
        assert fragment in str(error.value)


@pytest.mark.parametrize("name", ["missing.json", "folder", "latin1.json"])
def test_unreadable_paths_are_refused_with_advice(tmp_path, name):
    (tmp_path / "folder").mkdir()
    (tmp_path / "latin1.json").write_bytes('{"field": "Zn \u00b5g"}'.encode("latin-1"))
    path = str(tmp_path / name)
    with pytest.raises(FieldcastError, match=f"Cannot read the model file {re.escape(path)}: .*Check the path"):
        ModelDocument.load(path)
