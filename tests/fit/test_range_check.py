"""The warning for a fitted range beyond the study while the semivariogram levels off inside it.

Data: the published Meuse topsoil samples (Rikken & Van Rijn 1993; tests/data/README.md), EPSG:28992 metres,
log(zinc). Its constant-mean REML fits differ by family: the exponential one runs its range far past the
4.4 km study, the spherical one stays inside it.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.distance import pdist

from fieldcast.algorithms.fit.fitting import fit_model
from fieldcast.algorithms.fit.range_check import levelling_distance, range_warning, study_size
from fieldcast.algorithms.fit.variogram import empirical_semivariogram


@pytest.fixture(scope="module")
def log_zinc(meuse):
    return np.log(meuse.zinc)


def test_study_size_is_the_largest_distance_between_samples(meuse):
    assert study_size(meuse.xy) == pytest.approx(pdist(meuse.xy).max())  # scipy brute force over every pair
    line = np.column_stack([np.linspace(0.0, 300.0, 7), np.linspace(0.0, 400.0, 7)])
    assert study_size(line) == pytest.approx(500.0)  # samples on one line: its length (3-4-5 triangle)


def test_the_meuse_semivariogram_levels_off_well_inside_the_study(meuse, log_zinc):
    size = study_size(meuse.xy)
    level = levelling_distance(np.asarray(meuse.xy), log_zinc - log_zinc.mean(), size)
    # Read off the classical estimate itself: the first lag at 90 % of the mean level beyond a quarter of the size.
    variogram = empirical_semivariogram(meuse.xy, log_zinc, n_lags=15, cutoff=size / 2)
    far = variogram.gamma[variogram.distance > size / 4].mean()
    assert level == variogram.distance[np.argmax(variogram.gamma >= 0.9 * far)]
    assert level < size / 4  # the log-zinc variogram levels off near 0.5-1 km (from memory of this data set)


def test_an_exponential_constant_mean_fit_on_meuse_is_told_to_try_a_trend(meuse, log_zinc):
    result = fit_model(meuse.xy, log_zinc, kernel="exponential", anisotropy=False, mean="constant")
    assert result.covariance.structures[0].effective_range > pdist(meuse.xy).max()
    words = range_warning(meuse.xy, log_zinc, result)
    assert words is not None and "TREND = linear or quadratic" in words and "'Cross-validate model'" in words


def test_a_spherical_fit_inside_the_study_draws_no_warning(meuse, log_zinc):
    result = fit_model(meuse.xy, log_zinc, kernel="spherical", anisotropy=False, mean="constant")
    assert result.covariance.structures[0].effective_range < pdist(meuse.xy).max()
    assert range_warning(meuse.xy, log_zinc, result) is None
