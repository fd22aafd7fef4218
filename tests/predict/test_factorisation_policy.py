"""One factorisation rule for ill-conditioned kriging systems, on the published Meuse samples.

A Gaussian correlation without nugget on log-zinc gives covariance matrices whose condition number grows with the
range and with the number of samples: at 600 m the full 155-sample matrix is usable but past the warning level, at
1,000 m it is refused, and local systems of 64 neighbours are mostly refused while systems of 16 stay well conditioned.
"""
from __future__ import annotations

import re

import numpy as np
import pytest
from scipy import linalg
from scipy.spatial import cKDTree

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.linalg.batched import cholesky_stack
from fieldcast.algorithms.linalg.condition_policy import (
    WARN_RECIPROCAL,
    certified_reciprocal_condition,
    reciprocal_condition,
    refuse_level,
    stack_reciprocal_condition,
    usable,
    warning_text,
)
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.predict.local import LocalKrigingPredictor
from reference import MEUSE_LOG_ZINC

SILL = 0.6  # about the variance of log-zinc (0.52 on these samples)


def gaussian(range_m: float) -> CovarianceModel:
    """Gaussian correlation without nugget (the smoothest family, the worst conditioned)."""
    return CovarianceModel((Structure("gaussian", SILL, range_m),), 0.0)


@pytest.fixture(scope="module")
def log_zinc(meuse):
    return np.log(meuse.zinc)


@pytest.fixture(scope="module")
def constant(meuse):
    return MeanModel.for_data("constant", meuse.xy)


def one_norm_condition(matrix: np.ndarray) -> float:
    """Exact 1-norm condition number by numpy (the reference for the LAPACK estimate)."""
    return float(np.linalg.cond(matrix, 1))


def test_dpocon_estimate_is_close_to_the_exact_condition(meuse):
    # The LAPACK 1-norm estimator is a lower bound on the condition number and usually within a factor of 3
    # (Higham 2002, chapter 15; from memory); allow a factor of 10.
    for range_m in (200.0, 400.0, 600.0):
        matrix = gaussian(range_m).data_covariance(meuse.xy)
        estimate = reciprocal_condition(matrix, linalg.cholesky(matrix, lower=True))
        exact = 1.0 / one_norm_condition(matrix)
        assert exact * (1 - 1e-6) <= estimate <= 10 * exact


def test_levels_follow_the_spacing_of_double_precision_numbers():
    # Relative error of a solve ~ cond * u (Higham 2002, section 10.1): refuse at k * u, warn at u / 1e-4 (a relative
    # error of 1e-4 is common practice), with u the spacing of IEEE 754 binary64 numbers at 1: 2**-52.
    eps = 2.0 ** -52
    assert usable(155 * eps * 1.01, 155) and not usable(155 * eps * 0.99, 155)
    assert warning_text("matrix", eps / 1e-4 * 1.01) is None
    assert "condition number about 5.0e+11" in warning_text("matrix", eps / 1e-4 / 1.1)  # 1.1 / (1e4 eps)


def test_global_kriging_at_600_m_warns_with_the_condition_estimate(meuse, log_zinc, constant):
    predictor = KrigingPredictor(meuse.xy, log_zinc, gaussian(600.0), constant)
    assert len(predictor.warnings) == 1
    message = predictor.warnings[0]
    assert "KERNEL" in message and "nugget" in message and "exponential" in message and "near-duplicate" in message
    stated = float(re.search(r"condition number about ([0-9.e+]+)", message).group(1))
    exact = one_norm_condition(gaussian(600.0).data_covariance(meuse.xy))
    assert exact / 10 <= stated <= exact * 1.05  # the estimate, rounded to two digits, never above the exact value
    assert 1.0 / WARN_RECIPROCAL < exact < 1.0 / refuse_level(155) * 10


def test_global_kriging_at_1000_m_is_refused_with_advice(meuse, log_zinc, constant):
    with pytest.raises(FieldcastError, match="give the model a nugget"):
        KrigingPredictor(meuse.xy, log_zinc, gaussian(1000.0), constant)


def test_local_64_neighbours_at_1000_m_leaves_refused_systems_unresolved_and_counts_them(
        meuse, meuse_grid, log_zinc, constant):
    targets = meuse_grid.xy[::25]
    local = LocalKrigingPredictor(meuse.xy, log_zinc, gaussian(1000.0), constant, neighbours=64)
    mean, variance = local.predict(targets)  # no exception: bad systems cost only their cells
    unresolved = np.isnan(mean)
    assert np.array_equal(unresolved, np.isnan(variance))
    assert unresolved.sum() > 0 and local.last_unresolved == unresolved.sum()
    assert local.singular_targets == unresolved.sum()  # every target has 64 samples in range
    # Reference: numpy's exact condition number of each target's neighbour matrix (its 64 samples).
    neighbours, _ = local.weights(targets)
    condition = np.array([one_norm_condition(gaussian(1000.0).data_covariance(meuse.xy[rows]))
                          for rows in neighbours])
    assert np.all(condition[unresolved] > 1.0 / refuse_level(64))  # refused only past the refuse level
    assert np.all(condition[~unresolved] < 10.0 / refuse_level(64))


def test_local_16_neighbours_at_1000_m_is_resolved_and_equals_a_reference_solve(
        meuse, meuse_grid, log_zinc, constant):
    targets = meuse_grid.xy[::10]
    local = LocalKrigingPredictor(meuse.xy, log_zinc, gaussian(1000.0), constant, neighbours=16)
    mean, variance = local.predict(targets)
    assert local.last_unresolved == 0 and local.singular_targets == 0 and local.ill_conditioned_targets == 0
    # These systems are well conditioned, so the predictions far outside the data (the Gaussian model's large
    # weights of opposite sign) are the model's exact answer: check the worst against the bordered ordinary-kriging
    # system (Cressie 1993, section 3.2) solved by scipy.
    worst = int(np.argmax(np.abs(mean - np.mean(log_zinc))))
    rows = local.weights(targets[worst:worst + 1])[0][0]
    model = gaussian(1000.0)
    system = np.ones((17, 17))
    system[:16, :16] = model.data_covariance(meuse.xy[rows])
    system[16, 16] = 0.0
    right = np.append(model.cross_covariance(meuse.xy[rows], targets[worst:worst + 1])[:, 0], 1.0)
    weights = linalg.solve(system, right)[:16]
    assert mean[worst] == pytest.approx(weights @ log_zinc[rows], rel=1e-6)


def test_well_conditioned_spherical_model_with_nugget_draws_no_warning(meuse, meuse_grid, log_zinc, constant):
    spherical = MEUSE_LOG_ZINC
    assert KrigingPredictor(meuse.xy, log_zinc, spherical, constant).warnings == []
    local = LocalKrigingPredictor(meuse.xy, log_zinc, spherical, constant, neighbours=64)
    mean, _ = local.predict(meuse_grid.xy)
    assert local.last_unresolved == 0 and local.singular_targets == 0 and local.ill_conditioned_targets == 0
    sd = np.sqrt(spherical.sill)
    assert log_zinc.min() - 3 * sd < mean.min() and mean.max() < log_zinc.max() + 3 * sd  # common practice


def test_stacked_estimate_equals_lapack_dpocon_for_each_matrix(meuse):
    # Reference: LAPACK dpocon through scipy, one matrix at a time (the estimator the stacked version runs);
    # neighbour matrices of 32 Meuse samples under a smooth and a rough model, and one singular stack entry.
    rows = cKDTree(meuse.xy).query(meuse.xy[::10], k=32)[1]
    for model in (gaussian(1000.0), MEUSE_LOG_ZINC):
        matrices = np.stack([model.data_covariance(meuse.xy[r]) for r in rows])
        factors, positive = cholesky_stack(matrices)
        positive[0] = False
        stacked = stack_reciprocal_condition(matrices, factors, positive)
        for matrix, ok, value in zip(matrices, positive, stacked):
            expected = reciprocal_condition(matrix, linalg.cholesky(matrix, lower=True)) if ok else 0.0
            assert value == pytest.approx(expected, rel=1e-8, abs=0.0)


@pytest.mark.parametrize("k", [8, 32, 64])
def test_certified_floor_never_exceeds_the_exact_reciprocal_condition(meuse, k):
    # The floor (Golub & Van Loan 2013, Matrix Computations, sections 2.3.2 and 8.1) against numpy's exact 1-norm
    # condition number, on the neighbour matrices (over the sill) of Meuse samples under the published-style
    # spherical model with its nugget, with and without per-sample error variances.
    rows = cKDTree(meuse.xy).query(meuse.xy[::5], k=k)[1]
    errors = np.random.default_rng(3).uniform(0.0, 0.2, len(meuse.xy))  # invented error variances
    sill = MEUSE_LOG_ZINC.sill
    for error_variance in (np.zeros(len(meuse.xy)), errors):
        for set_rows in rows:
            own = error_variance[set_rows]
            matrix = (MEUSE_LOG_ZINC.data_covariance(meuse.xy[set_rows]) + np.diag(own)) / sill
            floor = certified_reciprocal_condition(k, (MEUSE_LOG_ZINC.nugget + own.min()) / sill,
                                                   1.0 + own.max() / sill)
            assert 0.0 < floor <= 1.0 / one_norm_condition(matrix)


def test_local_decisions_are_those_of_the_estimate_alone(meuse, meuse_grid, log_zinc, constant, monkeypatch):
    # Where the floor clears the warning level the estimate would too (it never underestimates the reciprocal
    # condition, Hager 1984), so skipping it changes nothing: same predictions and tallies with the floor disabled,
    # for a well-conditioned model with nugget and a Gaussian model without one (refused and warned systems).
    import fieldcast.algorithms.predict.local as local_module
    for model, k in ((MEUSE_LOG_ZINC, 32), (gaussian(1000.0), 64), (gaussian(300.0), 32)):
        results = []
        for disabled in (False, True):
            if disabled:
                monkeypatch.setattr(local_module, "certified_reciprocal_condition",
                                    lambda size, least, largest: np.zeros(np.shape(least)))
            local = LocalKrigingPredictor(meuse.xy, log_zinc, model, constant, neighbours=k)
            mean, variance = local.predict(meuse_grid.xy[::4])
            results.append((mean, variance, local.singular_targets, local.ill_conditioned_targets))
            monkeypatch.undo()
        np.testing.assert_array_equal(results[0][0], results[1][0])
        np.testing.assert_array_equal(results[0][1], results[1][1])
        assert results[0][2:] == results[1][2:]
