"""METHOD wls takes the bounds and the bound warnings of the likelihood fits (algorithms/fit/variogram_fit.py).

Simulation study: invented values with a strong linear trend in x, fitted with a constant mean, so the
variogram of the values keeps rising across the study area and has no sill.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from fieldcast.algorithms.fit.bound_warnings import bound_warnings
from fieldcast.algorithms.fit.fitting import fit_model
from fieldcast.algorithms.fit.search import diameter
from fieldcast.algorithms.fit.variogram_fit import fit_wls
from fieldcast.algorithms.model.parameters import (
    PARTIAL_SILL_BOUNDS,
    RANGE_UPPER_FACTOR,
    DataScales,
    ParameterLayout,
    parameter_bounds,
)


@pytest.fixture(scope="module")
def trending():
    rng = np.random.default_rng(0)
    xy = rng.uniform(0.0, 1000.0, (60, 2))
    return xy, xy[:, 0] / 100.0 + 0.3 * rng.standard_normal(60)


def test_an_unbounded_least_squares_fit_of_a_trend_runs_far_beyond_the_data(trending):
    xy, values = trending
    loose = fit_wls(xy, values - values.mean(), "exponential", anisotropy=False).structures[0]
    assert loose.range > 10 * diameter(xy) and loose.partial_sill > 10 * values.var()


def test_the_wls_fit_stays_inside_the_likelihood_bounds_and_says_the_range_hit_its_bound(trending):
    xy, values = trending
    result = fit_model(xy, values, kernel="exponential", anisotropy=False, method="wls")
    structure = result.covariance.structures[0]
    # The constant-mean fit's variance scale is the values' variance (RMS residual of the OLS mean).
    assert structure.range <= RANGE_UPPER_FACTOR * diameter(xy) * (1 + 1e-9)
    assert structure.partial_sill <= PARTIAL_SILL_BOUNDS[1] * values.var() * (1 + 1e-9)
    assert any(w.startswith("The range hit its upper bound") for w in result.warnings)
    assert result.covariance.nugget >= 1e-6 * values.var() * (1 - 1e-9)


def test_a_value_past_its_bound_is_reported_as_on_it():
    layout = ParameterLayout("exponential", 1, False)
    bounds = parameter_bounds(layout, DataScales(10.0, 1000.0, 1.0))
    theta = np.array([math.log(80.0), math.log(100.0), math.log(0.5)])  # partial sill 80 > 50 (the bound)
    (message,) = bound_warnings(layout, theta, bounds)
    assert message.startswith("The partial sill hit its upper bound (80")
