"""Log transform and lognormal back-transforms checked against scipy.stats.lognorm."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.model.transform import Transform

MU = np.array([-1.5, 0.0, 2.3, 5.9, 7.4])
S2 = np.array([0.01, 0.5, 0.2, 1.3, 0.0])


def reference(mu, s2):
    """scipy's lognormal: ln X ~ N(mu, s2) is lognorm(s=sqrt(s2), scale=exp(mu))."""
    return stats.lognorm(s=np.sqrt(s2), scale=np.exp(mu))


@pytest.mark.parametrize("offset", [0.0, 5.0, -0.5])
def test_log_back_transforms_match_scipy_lognorm(offset):
    transform = Transform("log", offset)
    positive = S2 > 0
    distribution = reference(MU[positive], S2[positive])
    # Reference library: scipy.stats.lognorm median, mean and variance of exp(Y), Y ~ N(mu, s2); Z is
    # exp(Y) - offset, so the offset shifts median and mean and leaves the variance alone.
    np.testing.assert_allclose(transform.back_median(MU[positive]), distribution.median() - offset, rtol=1e-12)
    np.testing.assert_allclose(transform.back_mean(MU[positive], S2[positive]), distribution.mean() - offset,
                               rtol=1e-12)
    np.testing.assert_allclose(transform.back_variance(MU[positive], S2[positive]), distribution.var(),
                               rtol=1e-12)
    np.testing.assert_allclose(transform.back_sd(MU[positive], S2[positive]), distribution.std(), rtol=1e-12)


@pytest.mark.parametrize("offset", [0.0, 5.0, -0.5])
@pytest.mark.parametrize("probability", [0.05, 0.5, 0.95, 0.999])
def test_log_quantiles_match_scipy_lognorm(offset, probability):
    # Reference library: scipy.stats.lognorm.ppf of exp(Y), Y ~ N(mu, s2), shifted by the offset;
    # the standard normal quantile from scipy.stats.norm.ppf.
    transform = Transform("log", offset)
    z = stats.norm.ppf(probability)
    expected = reference(MU, S2).ppf(probability) - offset
    expected[S2 == 0] = np.exp(MU[S2 == 0]) - offset  # scipy gives NaN for s = 0; the point value is exp(mu)
    np.testing.assert_allclose(transform.back_quantile(MU, S2, z), expected, rtol=1e-12)


def test_no_transform_quantiles_and_sd_are_normal():
    # Reference library: scipy.stats.norm(mu, sqrt(s2)).ppf and .std.
    transform = Transform()
    positive = S2 > 0
    distribution = stats.norm(MU[positive], np.sqrt(S2[positive]))
    z = stats.norm.ppf(0.05)
    np.testing.assert_allclose(transform.back_quantile(MU[positive], S2[positive], z), distribution.ppf(0.05),
                               rtol=1e-12)
    np.testing.assert_allclose(transform.back_sd(MU, S2), np.sqrt(S2), rtol=1e-15)


def test_zero_variance_backtransforms_to_the_point_value():
    # Degenerate lognormal (s2 = 0): median = mean = exp(mu), variance 0 (limit of Aitchison & Brown 1957,
    # The Lognormal Distribution, eq. 2.7 and 2.8).
    transform = Transform("log", 1.0)
    np.testing.assert_allclose(transform.back_mean(MU, np.zeros(5)), np.exp(MU) - 1.0, rtol=1e-15)
    np.testing.assert_array_equal(transform.back_variance(MU, np.zeros(5)), np.zeros(5))


def test_forward_and_median_round_trip(meuse):
    transform = Transform("log", 2.0)
    modelled = transform.forward(meuse.zinc)
    np.testing.assert_allclose(modelled, np.log(meuse.zinc + 2.0), rtol=1e-15)
    np.testing.assert_allclose(transform.back_median(modelled), meuse.zinc, rtol=1e-13)


def test_no_transform_is_the_identity_and_copies(meuse):
    transform = Transform()
    values = transform.forward(meuse.zinc)
    np.testing.assert_array_equal(values, meuse.zinc)
    assert values is not meuse.zinc and values.flags.writeable
    np.testing.assert_array_equal(transform.back_median(MU), MU)
    np.testing.assert_array_equal(transform.back_mean(MU, S2), MU)
    np.testing.assert_array_equal(transform.back_variance(MU, S2), S2)
    assert transform.units_note == "attribute units"


def test_log_refuses_values_it_cannot_take():
    with pytest.raises(FieldcastError, match="offset larger than 2"):
        Transform("log").forward(np.array([-2.0, 1.0, 3.0]))
    with pytest.raises(FieldcastError, match=r"above 0 \(value \+ offset > 0\)"):
        Transform("log").forward(np.array([0.0, 1.0]))
    with pytest.raises(FieldcastError, match="NaN or infinite"):
        Transform("log", 1.0).forward(np.array([1.0, np.nan]))
    with pytest.raises(FieldcastError, match="Unknown transform"):
        Transform("sqrt")
    with pytest.raises(FieldcastError, match="finite"):
        Transform("log", float("inf"))


def test_plain_data_round_trip():
    transform = Transform("log", 0.25)
    assert Transform.from_dict(transform.to_dict()) == transform
    assert transform.to_dict() == {"kind": "log", "offset": 0.25}
    assert "natural log" in transform.units_note and "0.25" in transform.units_note
