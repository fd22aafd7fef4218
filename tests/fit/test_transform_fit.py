"""Completing a transform from the samples: the Box-Cox lambda by profile likelihood against scipy for
independent data, the normal-score knots weighted by the declustering weights."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.fit.declustering import decluster
from fieldcast.algorithms.fit.options import FitOptions
from fieldcast.algorithms.fit.transform_fit import fitted_transform
from fieldcast.algorithms.model.transform import Transform

PROFILE = FitOptions(kernel="exponential", anisotropy=False, method="ml")


def test_boxcox_lambda_of_independent_data_matches_scipy():
    # Simulation study (invented data): independent lognormal values at random places, so the ML fit has no
    # spatial structure to find and the profile likelihood is the independent one. Reference library:
    # scipy.stats.boxcox's lambda maximises boxcox_llf, (lambda - 1) sum log x - n/2 log(sigma^2_ML) (Box & Cox
    # 1964); the search stops within 0.01, the fit's tolerances add a little.
    rng = np.random.default_rng(7)
    xy, values = rng.uniform(0.0, 1000.0, (100, 2)), rng.lognormal(2.0, 0.6, 100)
    found = fitted_transform(Transform("boxcox", 0.0), xy, values, PROFILE)
    assert found.transform.boxcox_lambda == pytest.approx(stats.boxcox(values)[1], abs=0.03)
    assert "profile likelihood" in found.log_lines()[0]


def test_boxcox_profile_refuses_values_below_the_offset():
    with pytest.raises(FieldcastError, match="offset larger than 1"):
        fitted_transform(Transform("boxcox", 0.0), np.eye(3), np.array([-1.0, 2.0, 3.0]), PROFILE)


def test_normal_score_uses_the_declustering_weights(meuse):
    found = fitted_transform(Transform("normalscore"), meuse.xy, meuse.zinc, PROFILE).transform
    weights = decluster(meuse.xy, meuse.zinc).weights
    assert found == Transform.normal_score(meuse.zinc, weights)
    assert found != Transform.normal_score(meuse.zinc)
    given = Transform("boxcox", 1.0, 0.3)
    assert fitted_transform(given, meuse.xy, meuse.zinc, PROFILE).transform is given
