"""Box-Cox and normal-score transforms: Box-Cox lambda = 0 is the log model, back-transforms against scipy,
the normal-score back-transform of kriged Gaussians against the empirical quantiles it was built from."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, special, stats

from fieldcast.algorithms import KrigingPredictor, MeanModel, SurfaceScale
from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.io.model_checks import check_document
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.exceedance import exceedance_probability
from reference import MEUSE_LOG_ZINC

MU = np.array([-0.8, 0.0, 1.1, 2.3])
S2 = np.array([0.05, 0.4, 1.0, 0.2])
KINDS = ["prediction", "variance", "sd", "lower", "upper", "exceedance"]


def test_boxcox_lambda_zero_is_the_log_model(meuse):
    # Box & Cox (1964): lambda = 0 is the natural log; every output of a kriged Meuse log-zinc model must agree.
    log, boxcox = Transform("log", 1.0), Transform("boxcox", 1.0, 0.0)
    np.testing.assert_array_equal(boxcox.forward(meuse.zinc), log.forward(meuse.zinc))
    predictor = KrigingPredictor(meuse.xy, log.forward(meuse.zinc), MEUSE_LOG_ZINC,
                                 MeanModel.for_data("constant", meuse.xy))
    mean, variance = predictor.predict(meuse.xy[:40] + 35.0)
    for backtransform in ("median", "mean"):
        expected = SurfaceScale(log, backtransform, threshold=500.0).layers(mean, variance, KINDS)
        found = SurfaceScale(boxcox, backtransform, threshold=500.0).layers(mean, variance, KINDS)
        for kind in KINDS:
            np.testing.assert_array_equal(found[kind], expected[kind])


@pytest.mark.parametrize("lam", [0.5, -0.3, 1.4])
def test_boxcox_forward_and_quantiles_match_scipy(lam):
    # Reference library: scipy.special.boxcox / inv_boxcox (Box & Cox 1964 transform) with the offset added first;
    # a monotone transform carries the normal quantile mu + z s over.
    transform = Transform("boxcox", 2.0, lam)
    values = np.array([0.1, 1.0, 7.5, 40.0])
    np.testing.assert_allclose(transform.forward(values), special.boxcox(values + 2.0, lam), rtol=1e-12)
    mu, s2 = special.boxcox(np.array([1.0, 3.0, 9.0]), lam), np.array([0.01, 0.04, 0.02])
    for z in (-1.6449, 0.0, 1.6449):
        expected = special.inv_boxcox(mu + z * np.sqrt(s2), lam) - 2.0
        np.testing.assert_allclose(transform.back_quantile(mu, s2, z), expected, rtol=1e-10)


@pytest.mark.parametrize("lam", [0.5, -0.2, 1.4])
def test_boxcox_mean_and_variance_match_numerical_integration(lam):
    # Reference library: scipy.integrate.quad of inv_boxcox(y) against the normal density N(mu, s2).
    transform = Transform("boxcox", 0.0, lam)
    mu, s2 = special.boxcox(np.array([3.0, 6.0]), lam), np.array([0.05, 0.08])
    for m, v in zip(mu, s2):
        density = stats.norm(m, np.sqrt(v)).pdf
        bounds = (m - 8 * np.sqrt(v), m + 8 * np.sqrt(v))  # inside the range lambda y + 1 > 0
        first = integrate.quad(lambda y, density=density: special.inv_boxcox(y, lam) * density(y), *bounds)[0]
        second = integrate.quad(lambda y, density=density: special.inv_boxcox(y, lam) ** 2 * density(y), *bounds)[0]
        np.testing.assert_allclose(transform.back_mean(m, v), first, rtol=1e-6)
        np.testing.assert_allclose(transform.back_variance(m, v), second - first**2, rtol=1e-4)


def test_boxcox_inverse_outside_its_range():
    # (lambda y + 1)^(1/lambda) has no value where lambda y + 1 <= 0: the lower end (-offset) for lambda > 0,
    # no finite value (nodata) for lambda < 0.
    np.testing.assert_array_equal(Transform("boxcox", 1.0, 0.5).inverse(np.array([-2.0, -5.0])), [-1.0, -1.0])
    assert np.isinf(Transform("boxcox", 0.0, -0.5).inverse(np.array([2.0, 3.0]))).all()


def test_normal_scores_are_the_midpoint_plotting_positions(meuse):
    # Hazen plotting positions (k - 1/2) / n of distinct values (from memory: the midpoint of each step of the
    # empirical distribution function), mapped by scipy.stats.norm.ppf.
    values = np.unique(meuse.zinc)
    transform = Transform.normal_score(values)
    ranks = np.arange(1, len(values) + 1)
    np.testing.assert_allclose(transform.forward(values), stats.norm.ppf((ranks - 0.5) / len(values)), rtol=1e-12)


def test_normal_score_back_transform_of_kriged_gaussians_is_the_empirical_quantiles(meuse):
    # The quantile at probability p_k of the back-transformed N(0, 1) is the k-th sorted value (the knots are
    # the empirical quantiles, Deutsch & Journel 1998); simple kriging without nugget at a sample returns its
    # score with variance 0, so the back-transformed median there is the sample value.
    weights = np.linspace(0.5, 2.0, len(meuse.zinc))
    transform = Transform.normal_score(meuse.zinc, weights)
    order = np.argsort(meuse.zinc, kind="stable")
    sorted_values, sorted_weights = meuse.zinc[order], weights[order]
    distinct, first = np.unique(sorted_values, return_index=True)
    steps = np.add.reduceat(sorted_weights, first) / weights.sum()
    probabilities = np.cumsum(steps) - steps / 2
    quantiles = [transform.back_quantile(0.0, 1.0, z) for z in stats.norm.ppf(probabilities)]
    np.testing.assert_allclose(quantiles, distinct, rtol=1e-10)
    scores = transform.forward(meuse.zinc)
    model = MEUSE_LOG_ZINC.__class__(MEUSE_LOG_ZINC.structures, nugget=0.0)
    places, unique_rows = np.unique(meuse.xy, axis=0, return_index=True)
    predictor = KrigingPredictor(places, scores[unique_rows], model, MeanModel("known", 0.0))
    mean, variance = predictor.predict(places)
    np.testing.assert_allclose(transform.back_median(mean), meuse.zinc[unique_rows], rtol=1e-6)
    np.testing.assert_allclose(variance, 0.0, atol=1e-8)


def test_normal_score_mean_matches_numerical_integration(meuse):
    # Reference library: scipy.integrate.quad of the piecewise-linear inverse against N(mu, s2); Gauss-Hermite of
    # a function with kinks (40 nodes) converges slowly, so the agreement asked is 1 %.
    transform = Transform.normal_score(meuse.zinc)
    scores = np.array(transform.knots)[:, 1]
    for m, v in ((0.0, 1.0), (0.7, 0.3), (-1.0, 0.5)):
        density = stats.norm(m, np.sqrt(v)).pdf
        kinks = scores[np.abs(scores - m) < 10]  # quad integrates piece by piece between the knots
        expected = integrate.quad(lambda y, density=density: transform.inverse(y) * density(y), m - 10, m + 10,
                                  points=kinks, limit=1000)[0]
        np.testing.assert_allclose(transform.back_mean(m, v), expected, rtol=1e-2)


def test_normal_score_tails_are_as_stated():
    transform = Transform.normal_score(np.array([2.0, 4.0, 6.0, 12.0]))
    z, y = np.array(transform.knots).T
    assert (z[0], z[-1]) == (1.0, 13.0)  # range 10: one tenth below / above, no lower than half the smallest
    assert (y[0], y[-1]) == (-5.0, 5.0)
    np.testing.assert_array_equal(transform.forward(np.array([-50.0, 500.0])), [-5.0, 5.0])
    np.testing.assert_array_equal(transform.inverse(np.array([-9.0, 9.0])), [1.0, 13.0])


def model_data(transform: dict) -> dict:
    return {"format_version": 1, "crs": "x", "units": "m", "nugget": 0.1,
            "structures": [{"family": "exponential", "partial_sill": 1.0, "range": 100.0}],
            "mean": {"kind": "constant"}, "transform": transform}


def test_transforms_round_trip_through_the_model_file_form(meuse):
    for transform in (Transform("boxcox", 0.5, -0.25), Transform.normal_score(meuse.zinc)):
        data = transform.to_dict()
        assert Transform.from_dict(data) == transform
        check_document(model_data(data), "model.json", 1)


@pytest.mark.parametrize(("transform", "refusal"), [
    ({"kind": "boxcox", "offset": 0.0}, r"has no transform.lambda; it must be a finite number between -5 and 5"),
    ({"kind": "boxcox", "lambda": 9.0}, r"transform.lambda = 9.0; it must be a finite number between -5 and 5"),
    ({"kind": "normalscore", "knots": [[1, -5], [3, 0], [2, 5]]}, r"transform.knots = .*both increasing"),
    ({"kind": "normalscore"}, r"has no transform.knots"),
])
def test_model_files_with_unusable_transforms_are_refused(transform, refusal):
    with pytest.raises(FieldcastError, match=refusal):
        check_document(model_data(transform), "The model file", 1)


def test_incomplete_or_bad_transforms_are_refused():
    with pytest.raises(FieldcastError, match=r"offset larger than 1"):
        Transform("boxcox", 0.0, 0.5).forward(np.array([-1.0, 2.0]))
    with pytest.raises(FieldcastError, match="BOXCOX_LAMBDA"):
        Transform("boxcox", 0.0, 7.0)
    with pytest.raises(FieldcastError, match="increase"):
        Transform("normalscore", knots=((1.0, -5.0), (3.0, 0.0), (2.0, 5.0)))
    with pytest.raises(FieldcastError, match="two different values"):
        Transform.normal_score(np.array([3.0, 3.0]))


def test_exceedance_of_thresholds_outside_the_transform_range():
    # Z + offset > 0 under Box-Cox, so every place exceeds a threshold at or below -offset; a normal-score
    # threshold beyond the upper bound gets the tail score 5, P(N(0, 1) > 5) by scipy.stats.norm.sf.
    mean, variance = np.array([0.2, 1.0]), np.array([0.3, 0.1])
    np.testing.assert_array_equal(exceedance_probability(mean, variance, -2.0, transform=Transform("boxcox", 2.0, 0.5)),
                                  [1.0, 1.0])
    scores = Transform.normal_score(np.array([2.0, 4.0, 6.0, 12.0]))
    np.testing.assert_allclose(exceedance_probability(np.zeros(1), np.ones(1), 99.0, transform=scores),
                               stats.norm.sf(5.0), rtol=1e-12)
