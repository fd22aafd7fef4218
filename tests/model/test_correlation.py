"""Effective ranges (algorithms/correlation.py): the scaled distance where correlation falls to 0.05.

Every expected value is computed here from the published formula, written out independently of the engine.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import optimize, special

from fieldcast.algorithms.model.correlation import effective_range_factor, reach_factor


def test_exponential_closed_form():
    # exp(-r) = 0.05  =>  r = ln 20 ~ 2.996 (common practice: the "practical range" is 3a).
    assert effective_range_factor("exponential") == pytest.approx(math.log(20.0), rel=1e-12)
    assert effective_range_factor("exponential") == pytest.approx(2.996, abs=1e-3)


def test_gaussian_closed_form():
    # exp(-r^2) = 0.05  =>  r = sqrt(ln 20) ~ 1.731 (common practice: "sqrt(3) a").
    assert effective_range_factor("gaussian") == pytest.approx(math.sqrt(math.log(20.0)), rel=1e-12)
    assert effective_range_factor("gaussian") == pytest.approx(1.731, abs=1e-3)


def test_spherical_is_the_root_of_the_cubic_not_the_support():
    # The spherical model 1 - 1.5 r + 0.5 r^3 for r < 1 (Journel & Huijbregts 1978, Mining Geostatistics)
    # equals 0.05 at the one root in (0, 1) of 0.5 r^3 - 1.5 r + 0.95 = 0 (numpy.roots: companion-matrix
    # eigenvalues); the support r = 1, where it reaches 0, is farther out.
    roots = np.roots([0.5, 0.0, -1.5, 1.0 - 0.05])
    real = roots[np.isclose(roots.imag, 0.0)].real
    expected = float(real[(real > 0.0) & (real < 1.0)].item())
    assert effective_range_factor("spherical") == pytest.approx(expected, rel=1e-9)
    assert effective_range_factor("spherical") == pytest.approx(0.811, abs=1e-3)


def _matern32(r: float) -> float:
    # Rasmussen & Williams 2006, Gaussian Processes for Machine Learning, eq. 4.17, nu = 3/2, l = 1.
    return (1.0 + math.sqrt(3.0) * r) * math.exp(-math.sqrt(3.0) * r)


def _matern52(r: float) -> float:
    # Rasmussen & Williams 2006, eq. 4.17, nu = 5/2, l = 1.
    return (1.0 + math.sqrt(5.0) * r + 5.0 * r * r / 3.0) * math.exp(-math.sqrt(5.0) * r)


def _matern(nu: float):
    # Rasmussen & Williams 2006, eq. 4.14 with l = 1: 2^(1-nu)/Gamma(nu) (sqrt(2 nu) r)^nu K_nu(sqrt(2 nu) r).
    def rho(r: float) -> float:
        z = math.sqrt(2.0 * nu) * r
        return 2.0 ** (1.0 - nu) / math.gamma(nu) * z**nu * float(special.kv(nu, z))

    return rho


@pytest.mark.parametrize(("family", "smoothness", "rho"), [
    ("matern32", None, _matern32),
    ("matern52", None, _matern52),
    ("matern", 0.7, _matern(0.7)),
    ("matern", 1.5, _matern(1.5)),
    ("matern", 4.0, _matern(4.0)),
])
def test_matern_roots_match_an_independent_brent_root(family, smoothness, rho):
    # Reference root: scipy.optimize.brentq on the formula above (correlation decreases from 1 to 0).
    expected = optimize.brentq(lambda r: rho(r) - 0.05, 1e-6, 50.0, xtol=1e-13)
    assert effective_range_factor(family, smoothness) == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize(("family", "rho"), [
    ("exponential", lambda r: math.exp(-r)),
    ("gaussian", lambda r: math.exp(-r * r)),
    ("matern32", _matern32),
    ("matern52", _matern52),
])
def test_fit_starts_use_the_distance_where_the_published_correlation_is_five_percent(family, rho):
    # Start ranges are placed where the published correlation (formulas above; 0.05 is the common-practice
    # "practical range" level) has fallen to 0.05: checked by evaluating the formula at the start factor.
    assert rho(reach_factor(family)) == pytest.approx(0.05, rel=1e-9)


def test_spherical_fit_starts_use_its_support():
    # The spherical correlation 1 - 1.5 r + 0.5 r^3 reaches 0 at r = 1 (Journel & Huijbregts 1978): its support.
    r = reach_factor("spherical")
    assert 1.0 - 1.5 * r + 0.5 * r**3 == pytest.approx(0.0, abs=1e-12)
