"""Cell declustering against a worked example computed by hand, and the Clark-Evans index of a lattice."""
from __future__ import annotations

import numpy as np

from fieldcast.algorithms.fit.declustering import cell_weights, clark_evans, decluster

# Worked example: five samples, three of them close together; cells of side 1, two origins.
XY = np.array([[0.0, 0.0], [0.4, 0.0], [0.9, 0.0], [2.0, 0.0], [0.0, 2.0]])
VALUES = np.array([10.0, 12.0, 14.0, 2.0, 4.0])


def test_cell_weights_reproduce_the_worked_example():
    # By hand (Journel 1983 cell declustering, weight 1 / (L n_j) per origin): origin (0, 0) puts A, B, C in one
    # cell of three occupied cells: A, B, C 1/9 each, D and E 1/3. Origin (-0.5, -0.5) splits C off: A, B 1/8,
    # C, D, E 1/4 among four cells. Sums 17/72, 17/72, 26/72, 42/72, 42/72 (total 2), scaled to mean 1 (x 5/2).
    expected = np.array([17, 17, 26, 42, 42]) / 72 * 2.5
    np.testing.assert_allclose(cell_weights(XY, 1.0, shifts=2), expected, rtol=1e-14)


def test_declustered_mean_of_the_worked_example():
    # By hand with one origin (0, 0): weights 5/9, 5/9, 5/9, 5/3, 5/3, declustered mean (10 + 12 + 14) / 9 + 2/3
    # + 4/3 = 6, against the raw mean 8.4; cells of 0.1 hold one sample each: equal weights, the raw mean.
    np.testing.assert_allclose(cell_weights(XY, 1.0, shifts=1), [5 / 9, 5 / 9, 5 / 9, 5 / 3, 5 / 3], rtol=1e-14)
    np.testing.assert_allclose(cell_weights(XY, 0.1), np.ones(5), rtol=1e-14)
    found = decluster(XY, VALUES, sizes=np.array([0.1, 1.0]), shifts=2)
    assert found.cell_size == 1.0 and found.raw_mean == 8.4  # the smaller declustered mean (common practice)
    # By hand, two origins (weights of the test above): (85 * 10 + 85 * 12 + 130 * 14 + 210 * 2 + 210 * 4) / 720.
    np.testing.assert_allclose(found.declustered_mean, 4950 / 720, rtol=1e-14)


def test_clark_evans_index_of_a_square_lattice_and_a_cluster():
    # Clark & Evans (1954): R = mean nearest-neighbour distance / (0.5 / sqrt(density)). A 10 x 10 lattice of
    # spacing d over its bounding box ((9 d)^2, 100 points) gives d / (0.5 * 9 d / 10) = 20 / 9.
    grid = np.stack(np.meshgrid(np.arange(10.0), np.arange(10.0)), axis=-1).reshape(-1, 2)
    np.testing.assert_allclose(clark_evans(grid * 7.0), 20 / 9, rtol=1e-12)
    # Invented example: a hot spot (value 9) sampled 100 times on a 1 m lattice in a 5 x 5 survey of 200 m
    # spacing (value 1): R stays near 1, but cells of 200 m give the patch the weight of about one sample.
    coarse = np.stack(np.meshgrid(np.arange(5.0), np.arange(5.0)), axis=-1).reshape(-1, 2) * 200.0
    survey = np.vstack([coarse, grid + 300.5])
    result = decluster(survey, np.concatenate([np.ones(25), np.full(100, 9.0)]))
    assert result.clark_evans > 0.5 and result.effective_share < 0.5
    assert result.clustered and "strongly clustered" in result.warning()
    assert result.declustered_mean < 0.5 * result.raw_mean
    assert decluster(grid * 7.0, np.arange(100.0)).warning() is None
