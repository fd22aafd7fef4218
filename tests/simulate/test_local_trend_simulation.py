"""Local conditioning around the trend estimated from all samples: realisations converge to universal kriging.

Data: the Meuse topsoil samples (Rikken & Van Rijn 1993; tests/data/README.md), log(zinc), the distance to the
river at the samples and at the published 40 m grid's cells; model MEUSE_LOG_ZINC; EPSG:28992 metres.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial import cKDTree

from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.simulate.simulation import simulate_conditional
from reference import MEUSE_LOG_ZINC

REALISATIONS = 400
GRID = GridSpec.from_extent(178500.0, 329600.0, 181600.0, 333700.0, 160.0)  # the Meuse samples' extent
CELLS = np.array([0, 7, GRID.n_cells // 2 + 3, GRID.n_cells // 3, GRID.n_cells - 5, GRID.n_cells - 1])
"""A few cells: near the north-west and south-east corners (far from the samples, where the trend's uncertainty
weighs most) and inside."""


@pytest.fixture(scope="module")
def meuse_data(meuse, meuse_grid):
    """Sample xy, log(zinc), dist at the samples, and dist at GRID's cells (the nearest published 40 m cell)."""
    _, nearest = cKDTree(meuse_grid.xy).query(GRID.cell_centres())
    return np.asarray(meuse.xy), np.log(meuse.zinc), meuse.dist[:, None], meuse_grid.dist[nearest][:, None]


def assert_converges_at_cells(realisations: np.ndarray, mean: np.ndarray, variance: np.ndarray) -> None:
    """Monte Carlo mean and variance at CELLS within 4 standard errors of kriging's.

    With R independent realisations the mean has standard error sqrt(variance / R) and the sample variance
    sqrt(2 / (R - 1)) * variance (normal theory); 4 standard errors over six cells fail by chance with
    probability about 6e-5 per check (common practice).
    """
    flat = realisations.reshape(len(realisations), -1)[:, CELLS]
    count = len(flat)
    assert np.all(np.abs(flat.mean(axis=0) - mean[CELLS]) < 4.0 * np.sqrt(variance[CELLS] / count))
    ratio = flat.var(axis=0, ddof=1) / variance[CELLS]
    assert np.all(np.abs(ratio - 1.0) < 4.0 * np.sqrt(2.0 / (count - 1)))


@pytest.mark.parametrize("kind, with_covariate", [("linear", False), ("constant", True)])
def test_all_samples_as_neighbours_converge_to_universal_kriging(meuse_data, kind, with_covariate):
    # Conditioning by kriging (Journel & Huijbregts 1978, Mining Geostatistics) around coefficients drawn from
    # their GLS posterior under a flat prior has universal kriging's mean and variance (Handcock & Stein 1993,
    # Technometrics 35(4), the Bayesian reading of universal kriging); with k = n samples per cell the local
    # simple kriging of the residuals is global, so the realisations converge to global universal kriging.
    xy, values, dist, cell_dist = meuse_data
    covariates, cell_covariates = (dist, cell_dist) if with_covariate else (None, None)
    mean_model = MeanModel.for_data(kind, xy, ("dist",) if with_covariate else ())
    result = simulate_conditional(xy, values, MEUSE_LOG_ZINC, mean_model, GRID, n_realisations=REALISATIONS,
                                  seed=12, covariates=covariates, grid_covariates=cell_covariates,
                                  neighbours=len(xy))
    assert result.unresolved == 0
    assert any("estimated once from all 155 samples" in note and "coefficients drawn" in note
               for note in result.notes)
    mean, variance = KrigingPredictor(xy, values, MEUSE_LOG_ZINC, mean_model, covariates).predict(
        GRID.cell_centres(), cell_covariates)
    assert_converges_at_cells(result.realisations, mean, variance)


def test_the_trend_uncertainty_is_in_the_spread(meuse_data):
    # The trend's coefficient variance widens the realisations where the trend is extrapolated: at the far
    # corner the spread exceeds simple kriging's (the trend taken as known) by g^T V_beta g (Cressie 1993,
    # Statistics for Spatial Data, 3.4), here by more than Monte Carlo error.
    xy, values, _, _ = meuse_data
    mean_model = MeanModel.for_data("quadratic", xy)
    result = simulate_conditional(xy, values, MEUSE_LOG_ZINC, mean_model, GRID, n_realisations=REALISATIONS,
                                  seed=3, neighbours=len(xy))
    universal = KrigingPredictor(xy, values, MEUSE_LOG_ZINC, mean_model).predict(GRID.cell_centres())[1]
    simple = KrigingPredictor(xy, values, MEUSE_LOG_ZINC, MeanModel("known")).predict(GRID.cell_centres())[1]
    corner = GRID.n_cells - 1
    spread = result.realisations.reshape(REALISATIONS, -1)[:, corner].var(ddof=1)
    assert universal[corner] > 1.5 * simple[corner]
    assert spread > simple[corner] * (1.0 + 4.0 * np.sqrt(2.0 / (REALISATIONS - 1)))


def test_local_trend_realisations_are_reproducible_with_a_seed(meuse_data):
    # Same seed, same realisations (coefficient draws included); another seed, other realisations.
    xy, values, dist, cell_dist = meuse_data
    mean_model = MeanModel.for_data("linear", xy, ("dist",))

    def run(seed: int) -> np.ndarray:
        return simulate_conditional(xy, values, MEUSE_LOG_ZINC, mean_model, GRID, n_realisations=3, seed=seed,
                                    covariates=dist, grid_covariates=cell_dist, neighbours=16).realisations

    first = run(5)
    assert np.isfinite(first).all()
    np.testing.assert_array_equal(first, run(5))
    assert not np.allclose(first, run(6))



def test_each_completed_data_set_gets_its_own_trend(meuse_data):
    # Realisation r is conditioned on data set r mod m with that set's GLS coefficients: a second set shifted
    # by 0.5 shifts universal kriging's mean by exactly 0.5 (its weights sum to one; Cressie 1993, 3.4), so the
    # odd realisations converge to kriging of the shifted set, the even ones to kriging of the first set.
    xy, values, _, _ = meuse_data
    mean_model = MeanModel.for_data("linear", xy)
    sets = np.stack([values, values + 0.5])
    result = simulate_conditional(xy, values, MEUSE_LOG_ZINC, mean_model, GRID, n_realisations=REALISATIONS,
                                  seed=21, neighbours=len(xy), value_sets=sets)
    mean, variance = KrigingPredictor(xy, values, MEUSE_LOG_ZINC, mean_model).predict(GRID.cell_centres())
    assert_converges_at_cells(result.realisations[0::2], mean, variance)
    assert_converges_at_cells(result.realisations[1::2], mean + 0.5, variance)
