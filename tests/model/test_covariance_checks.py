"""Unusable structure and model settings are refused with FieldcastError, naming the value and the remedy.

The admissible values follow the definitions in algorithms/model/covariance.py and correlation.py: a
variance (partial sill, nugget) is at least 0, a range is a positive distance, the minor/major ratio lies in
(0, 1], and the general Matérn needs its smoothness within SMOOTHNESS_BOUNDS. Variances stay at most
MAX_SILL and angles, means and trend frames are finite.
"""
from __future__ import annotations

import math

import pytest

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.fit.variogram import empirical_semivariogram
from fieldcast.algorithms.fit.variogram_fit import fit_semivariogram_model
from fieldcast.algorithms.model.correlation import SMOOTHNESS_BOUNDS, check_family
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from fieldcast.algorithms.model.mean import MeanModel


@pytest.mark.parametrize(("settings", "fragments"), [
    ({"partial_sill": -1.0}, ("partial sill", "got -1.0", "non-negative")),
    ({"partial_sill": math.nan}, ("partial sill", "got nan",)),
    ({"partial_sill": 1e300}, ("partial sill", "from 0 to 1e+100", "got 1e+300", "rescale the attribute")),
    ({"azimuth": math.nan}, ("azimuth of a covariance structure", "got nan", "from 0 to 180")),
    ({"azimuth": math.inf}, ("azimuth", "got inf")),
    ({"range": 0.0}, ("range of a covariance structure", "got 0.0", "above 0")),
    ({"range": math.inf}, ("range", "got inf")),
    ({"ratio": 0.0}, ("minor/major range ratio", "got 0.0", "(0, 1]")),
    ({"ratio": 1.5}, ("minor/major range ratio", "got 1.5")),
    ({"family": "cubic"}, ("Unknown covariance family 'cubic'", "choose one of")),
    ({"family": "matern", "smoothness": 9.0}, ("smoothness between", "got 9.0", "choose another family")),
])
def test_bad_structures_raise_fieldcast_errors_that_name_the_value(settings, fragments):
    arguments = {"family": "exponential", "partial_sill": 1.0, "range": 100.0} | settings
    with pytest.raises(FieldcastError) as error:
        Structure(**arguments)
    for fragment in fragments:
        assert fragment in str(error.value)


def test_bad_models_raise_fieldcast_errors():
    structure = Structure("spherical", 1.0, 50.0)
    with pytest.raises(FieldcastError, match=r"got -0\.5\. Give a non-negative nugget"):
        CovarianceModel((structure,), -0.5)
    with pytest.raises(FieldcastError, match="got 3. Give one structure, or two"):
        CovarianceModel((structure,) * 3)
    with pytest.raises(FieldcastError, match="got 0"):
        CovarianceModel(())
    with pytest.raises(FieldcastError, match=r"nugget must be a finite number .* got nan"):
        CovarianceModel((structure,), math.nan)
    # Each part below the limit, their total above it.
    halves = (Structure("spherical", 0.6e100, 50.0), Structure("exponential", 0.6e100, 500.0))
    with pytest.raises(FieldcastError, match=r"sill \(nugget plus partial sills\) must be .* got 1\.2e\+100"):
        CovarianceModel(halves)


@pytest.mark.parametrize(("settings", "fragments"), [
    ({"kind": "known", "known_value": math.nan}, ("known mean must be a finite number", "got nan",
                                                  "constant mean")),
    ({"origin": (math.nan, 0.0)}, ("trend origin", "(nan, 0.0)")),
    ({"scale": math.inf}, ("trend scale", "got inf")),
    ({"scale": 0.0}, ("trend scale", "got 0.0")),
])
def test_bad_mean_models_raise_fieldcast_errors_that_name_the_value(settings, fragments):
    with pytest.raises(FieldcastError) as error:
        MeanModel(**settings)
    for fragment in fragments:
        assert fragment in str(error.value)


def test_check_family_accepts_the_smoothness_bounds_and_refuses_beyond():
    low, high = SMOOTHNESS_BOUNDS
    check_family("matern", low)
    check_family("matern", high)
    with pytest.raises(FieldcastError, match="needs a smoothness"):
        check_family("matern", None)
    with pytest.raises(FieldcastError, match="needs a smoothness"):
        check_family("matern", high * 1.01)


def test_variogram_fit_refuses_an_anisotropic_fit_of_an_omnidirectional_semivariogram(meuse):
    variogram = empirical_semivariogram(meuse.xy, meuse.zinc)
    with pytest.raises(FieldcastError, match="directional_semivariograms or fit with anisotropy off"):
        fit_semivariogram_model([variogram], "spherical", anisotropy=True)
    with pytest.raises(FieldcastError, match="Unknown covariance family"):
        fit_semivariogram_model([variogram], "cubic", anisotropy=False)
