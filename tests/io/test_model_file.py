"""The model file (algorithms/model_file.py): JSON round trips without loss, and every refusal says what to do.

The models are invented to exercise every field of the format; nothing here is compared with outside data.
"""
from __future__ import annotations

import json
import re

import numpy as np
import pytest

from fieldcast.algorithms.errors import FieldcastError, FieldcastUsageError
from fieldcast.algorithms.io.covariates import Covariate, CovariateSet
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


def covariate_document() -> ModelDocument:
    """A constant mean with a continuous and a class covariate (baseline class 1), and standard errors."""
    covariates = CovariateSet((Covariate("dist", source="/data/dist.tif"),
                               Covariate("ffreq", "class", (1.0, 2.0, 3.0), 1.0, "/data/ffreq.tif")))
    mean = MeanModel("constant", origin=(179_123.5, 331_987.5), scale=2_000.0,
                     covariate_names=covariates.column_names)
    return ModelDocument(CovarianceModel((Structure("spherical", 0.4, 800.0),), 0.05), mean,
                         np.array([6.5, -2.0, -0.5, -0.75]), Transform("log"), CRS_WKT, "metre", "zinc", {},
                         covariates, np.array([0.1, 0.3, 0.12, 0.2]))


def assert_same(loaded: ModelDocument, original: ModelDocument) -> None:
    assert loaded.covariance == original.covariance
    assert loaded.mean == original.mean
    np.testing.assert_array_equal(loaded.coefficients, original.coefficients)
    assert loaded.transform == original.transform
    assert (loaded.crs_wkt, loaded.units, loaded.field, loaded.fit) == (
        original.crs_wkt, original.units, original.field, original.fit)
    assert loaded.covariates == original.covariates
    np.testing.assert_array_equal(loaded.standard_errors, original.standard_errors)


@pytest.mark.parametrize("make", [nested_document, known_mean_document, covariate_document])
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


def set_key(path: str, value):
    """A change that sets the key at ``path`` (``a[0].b`` style) to ``value``, or removes it when ``value`` is DROP."""
    *parents, last = re.findall(r"[^.\[\]]+", path)

    def change(data):
        for part in parents:
            data = data[int(part)] if part.isdigit() else data[part]
        if value is DROP:
            del data[last]
        else:
            data[last] = value
    return change


DROP = object()
ADVICE = "Refit the model with 'Fit covariance model', or correct the file."


@pytest.mark.parametrize(("path", "value", "shown", "requirement"), [
    ("format_version", "abc", '"abc"', "a whole number of 1 or more"),
    ("format_version", None, "null", "a whole number of 1 or more"),
    ("format_version", True, "true", "a whole number of 1 or more"),
    ("transform", "log", '"log"', "an object"),
    ("fit", "reml", '"reml"', "an object"),
    ("mean", DROP, None, "an object"),
    ("mean.origin", [179_000.0], "[179000.0]", "a list of two finite numbers"),
    ("mean.origin", [179_000.0, float("nan")], "[179000.0, NaN]", "a list of two finite numbers"),
    ("mean.known_value", float("nan"), "nan", "a finite number"),
    ("mean.scale", 0.0, "0.0", "a finite number above 0"),
    ("mean.kind", "cubic", '"cubic"', 'one of "known", "constant", "linear", "quadratic"'),
    ("mean.coefficients", [1.0, None, 2.0, 3.0], "[1.0, null, 2.0, 3.0]", "a list of finite numbers"),
    ("structures[0].azimuth", float("nan"), "nan", "a finite number of degrees"),
    ("structures[1].azimuth", "north", '"north"', "a finite number of degrees"),
    ("structures[0].partial_sill", 1e300, "1e+300", "at most 1e+100"),
    ("structures[1].partial_sill", -0.5, "-0.5", "a finite number of 0 or more"),
    ("structures[0].partial_sill", float("inf"), "inf", "a finite number of 0 or more"),
    ("structures[0].partial_sill", DROP, None, "a finite number of 0 or more"),
    ("nugget", float("-inf"), "-inf", "a finite number of 0 or more"),
    ("nugget", "0.1", '"0.1"', "a finite number of 0 or more"),
    ("structures[0].range", -5.0, "-5.0", "a finite number above 0"),
    ("structures[1].range", "far", '"far"', "a finite number above 0"),
    ("structures[1].ratio", 1.5, "1.5", "above 0 and at most 1"),
    ("structures[1].ratio", 0.0, "0.0", "above 0 and at most 1"),
    ("structures[0].smoothness", 50.0, "50.0", "from 0.2 to 5.0 for the matern family"),
    ("structures[0].smoothness", None, "null", "from 0.2 to 5.0 for the matern family"),
    ("structures[1].smoothness", 1.5, "1.5", "null for the spherical family"),
    ("structures[1].family", "cubic", '"cubic"', "one of"),
    ("structures", [], "[]", "a list of one or two structures"),
    ("structures", DROP, None, "a list of one or two structures"),
    ("transform.kind", "cube", '"cube"', 'one of "none", "log"'),
    ("transform.offset", float("nan"), "nan", "a finite number"),
    ("crs", DROP, None, "a text string"),
    ("units", 1, "1", "a text string"),
])
def test_malformed_keys_are_refused_naming_key_and_value(tmp_path, path, value, shown, requirement):
    file = tmp_path / "zinc.json"
    file.write_text(corrupted(set_key(path, value)), encoding="utf-8")  # json.dumps writes NaN/Infinity literals
    with pytest.raises(FieldcastError) as error:
        ModelDocument.load(str(file))
    message = str(error.value)
    named = f"The model file zinc.json has no {path};" if value is DROP else \
        f"The model file zinc.json has {path} = {shown};"
    assert message.startswith(named), message
    assert requirement in message and message.endswith(ADVICE)


def test_an_all_zero_sill_is_refused():
    def zero(data):
        data["nugget"] = 0.0
        for structure in data["structures"]:
            structure["partial_sill"] = 0.0
    with pytest.raises(FieldcastError, match=r"has nugget = 0\.0; .*\(now 0\.0\) is above 0"):
        ModelDocument.from_json(corrupted(zero))


def test_a_file_with_byte_order_mark_and_crlf_line_ends_is_read(tmp_path):
    original = nested_document()
    path = tmp_path / "windows.json"
    path.write_bytes(b"\xef\xbb\xbf" + original.to_json().replace("\n", "\r\n").encode("utf-8"))
    assert path.read_bytes().count(b"\r\n") > 10
    loaded = ModelDocument.load(str(path))
    assert_same(loaded, original)
    assert loaded.to_json() == original.to_json()


def test_a_valid_document_survives_the_checks_unchanged():
    data = nested_document().to_dict()
    text = json.dumps(data)
    assert ModelDocument.from_dict(data).to_dict() == data
    assert json.dumps(data) == text  # the checks did not modify the input


@pytest.mark.parametrize(("text", "fragments"), [
    (json.dumps({"format": "something else"}), ("not a Fieldcast model file", "'Fit covariance model'")),
    (json.dumps([1, 2]), ("not a Fieldcast model file",)),
    (corrupted(lambda d: d.update(format_version=FORMAT_VERSION + 1)),
     (f"format version {FORMAT_VERSION + 1}, newer than this plugin reads ({FORMAT_VERSION})",
      "Update Fieldcast or refit")),
    (corrupted(lambda d: d["mean"].update(coefficients=[1.0, 2.0])),
     ("lists 2 mean coefficients for a linear mean with 4 terms", "Refit the model")),
    ('{"format": "fieldcast-model",\n "mean": }', ("not valid JSON (line 2, column", "'Fit covariance model'")),
])
def test_unusable_documents_are_refused_with_advice(text, fragments):
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


def test_covariates_are_recorded_with_kind_classes_baseline_and_source():
    mean = json.loads(covariate_document().to_json())["mean"]
    assert mean["covariates"] == ["dist", "ffreq=2", "ffreq=3"]
    assert mean["standard_errors"] == [0.1, 0.3, 0.12, 0.2]
    assert mean["covariate_rasters"] == [
        {"name": "dist", "kind": "continuous", "source": "/data/dist.tif"},
        {"name": "ffreq", "kind": "class", "source": "/data/ffreq.tif", "classes": [1.0, 2.0, 3.0], "baseline": 1.0}]


@pytest.mark.parametrize(("change", "fragments"), [
    (lambda mean: mean["covariate_rasters"][1].update(baseline=4.0),
     ["mean.covariate_rasters[1].baseline = 4.0", "one of the classes"]),
    (lambda mean: mean["covariate_rasters"][1].update(kind="soil"),
     ["mean.covariate_rasters[1].kind", "\"continuous\", \"class\""]),
    (lambda mean: mean["covariate_rasters"][0].pop("name"), ["no mean.covariate_rasters[0].name"]),
    (lambda mean: mean["covariate_rasters"].pop(), ["covariate_rasters give the columns ['dist']", "Refit"]),
    (lambda mean: mean.update(standard_errors=[0.1]), ["1 mean standard errors", "Refit"]),
])
def test_bad_covariate_records_are_refused(change, fragments):
    data = json.loads(covariate_document().to_json())
    change(data["mean"])
    with pytest.raises(FieldcastError) as caught:
        ModelDocument.from_dict(data)
    for fragment in fragments:
        assert fragment in str(caught.value)


def test_a_document_whose_covariates_do_not_give_its_columns_is_a_usage_error():
    """A caller's broken contract, not the user's input (a loaded file is refused with advice before it)."""
    document = covariate_document()
    with pytest.raises(FieldcastUsageError, match="does not give the mean model's covariate columns"):
        ModelDocument(document.covariance, document.mean, document.coefficients, document.transform, CRS_WKT,
                      "metre", "zinc", {}, CovariateSet((Covariate("elev"),)))
