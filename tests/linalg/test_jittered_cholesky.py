"""The fit-and-draw rule of the factorisation policy: the smallest diagonal jitter on a stated ladder, or a refusal."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import linalg

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.linalg.condition_policy import JITTER_LIMIT, JITTER_START, jittered_cholesky
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.simulate.conditioning import SampleDraw, choose_neighbourhood
from fieldcast.algorithms.simulate.simulation import simulate_conditional, simulation_lattice


def factorises(matrix: np.ndarray) -> bool:
    """Whether scipy's Cholesky (LAPACK dpotrf) accepts the matrix: the outside judge of positive definiteness."""
    try:
        linalg.cholesky(matrix, lower=True)
        return True
    except linalg.LinAlgError:
        return False


def gaussian_covariance(xy: np.ndarray, range_m: float) -> np.ndarray:
    """exp(-(r / range)^2) written out from the Gaussian correlation's closed form (not the engine's code)."""
    distance = np.hypot(*(xy[:, None, :] - xy[None, :, :]).transpose(2, 0, 1))
    return np.exp(-(distance / range_m) ** 2)


def test_a_positive_definite_matrix_gets_no_jitter_and_lapacks_factor():
    matrix = gaussian_covariance(np.random.default_rng(0).uniform(0, 1000, (20, 2)), 50.0) + 0.1 * np.eye(20)
    (factor, lower), jitter = jittered_cholesky(matrix, "test matrix", "Change it.")
    assert jitter == 0.0 and lower
    np.testing.assert_allclose(np.tril(factor), linalg.cholesky(matrix, lower=True), rtol=1e-12, atol=1e-14)


@pytest.mark.parametrize("shift, steps", [(1e-11, 0), (1e-7, 3)])
def test_an_indefinite_matrix_gets_the_smallest_jitter_of_the_ladder_that_factorises(shift, steps):
    # Samples 1 m apart with a 300 m Gaussian range (sill 2) leave K with eigenvalues at rounding level; moving its
    # diagonal down by ``shift`` makes the smallest eigenvalue about -shift, so the first rung of the ladder
    # (JITTER_START x mean diagonal, times 10 per step) that exceeds ``shift`` is the one that must be taken.
    xy = np.random.default_rng(1).uniform(0, 25, (25, 2))
    matrix = 2.0 * gaussian_covariance(xy, 300.0) - shift * np.eye(25)
    assert not factorises(matrix)
    (factor, _), jitter = jittered_cholesky(matrix, "test matrix", "Change it.")
    scale = float(np.mean(np.diag(matrix)))
    assert jitter == pytest.approx(JITTER_START * scale * 10.0 ** steps, rel=1e-9)
    lower = np.tril(factor)
    np.testing.assert_allclose(lower @ lower.T, matrix + jitter * np.eye(len(matrix)), atol=1e-12 * scale)
    if steps:  # the rung below did not factorise
        assert not factorises(matrix + 0.1 * jitter * np.eye(len(matrix)))


def test_a_matrix_beyond_the_largest_jitter_is_refused_with_the_remedy():
    matrix = np.diag([1.0, 1.0, -1.0])  # eigenvalue -1: no jitter up to 1e-4 of the mean diagonal helps
    with pytest.raises(FieldcastError, match=r"The test matrix is not positive definite even after adding .* Change"):
        jittered_cholesky(matrix, "test matrix", "Change it.")
    with pytest.raises(FieldcastError, match="infinite or missing"):
        jittered_cholesky(np.diag([1.0, np.nan]), "test matrix", "Change it.")
    with pytest.raises(FieldcastError, match="not positive definite"):
        jittered_cholesky(np.zeros((2, 2)), "test matrix", "Change it.")


def test_a_smooth_model_on_a_fine_lattice_draws_with_the_jitter_stated_in_the_warnings():
    # A Gaussian correlation 20 cells long makes neighbouring lattice nodes nearly collinear in covariance: the
    # node covariance does not factorise as it is (checked with scipy below), so the draw takes the fit rule's jitter.
    grid = GridSpec(0.0, 500.0, 10.0, 50, 50)
    xy = np.random.default_rng(3).uniform(20.0, 480.0, (30, 2))
    model = CovarianceModel((Structure("gaussian", 1.0, 200.0),))
    rows, cols = choose_neighbourhood(grid, xy)
    lattice, row_offset, col_offset = simulation_lattice(grid, rows, cols)
    draw = SampleDraw(model, lattice, xy, rows + row_offset, cols + col_offset)
    nodes = draw.node_centres(draw.nodes)
    assert not factorises(gaussian_covariance(nodes, 200.0))
    assert JITTER_START <= draw.jitter <= JITTER_LIMIT
    assert factorises(gaussian_covariance(nodes, 200.0) + draw.jitter * np.eye(len(nodes)))
    result = simulate_conditional(xy, np.sin(xy[:, 0] / 90.0), model, MeanModel.for_data("constant", xy), grid,
                                  n_realisations=2, seed=4)
    assert any(f"a jitter of {draw.jitter:.0e} of the field variance" in warning for warning in result.warnings)
