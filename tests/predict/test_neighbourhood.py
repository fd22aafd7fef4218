"""Local (moving-neighbourhood) kriging on the published Meuse data, against global and brute-force kriging."""
from __future__ import annotations

import numpy as np
import pytest

from fieldcast.algorithms.errors import Cancelled, FieldcastError
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from fieldcast.algorithms.model.mean import MEAN_KINDS, MeanModel
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.predict.local import ROW_HASH_SEED, LocalKrigingPredictor, distinct_rows
from reference import MEUSE_LOG_ZINC

# Anisotropic variant rotated to the river's course.
ANISOTROPIC = CovarianceModel((Structure("exponential", 0.6, 400.0, azimuth=40.0, ratio=0.5),), 0.05)
# Nested structures with different anisotropies (the search frame follows the first one only).
CROSSED = CovarianceModel((Structure("exponential", 0.3, 300.0, azimuth=40.0, ratio=0.5),
                           Structure("spherical", 0.3, 1500.0, azimuth=100.0, ratio=0.8)), 0.05)


@pytest.fixture(scope="module")
def log_zinc(meuse):
    return np.log(meuse.zinc)


def mean_model(kind, meuse, log_zinc, covariate=False):
    names = ("sqrt_dist",) if covariate else ()
    return MeanModel.for_data(kind, meuse.xy, names, known_value=float(np.mean(log_zinc)))


@pytest.mark.parametrize("kind", MEAN_KINDS)
@pytest.mark.parametrize("model", [MEUSE_LOG_ZINC, ANISOTROPIC, CROSSED], ids=["spherical", "anisotropic", "crossed"])
def test_all_samples_as_neighbours_is_global_kriging(meuse, meuse_grid, log_zinc, kind, model):
    # Identity: with every sample in every neighbourhood the Lagrange system (Cressie 1993, Statistics for Spatial
    # Data, section 3.4) is the global universal-kriging system, whose solution KrigingPredictor computes in the
    # GLS form (same section); the two agree to round-off.
    mean = mean_model(kind, meuse, log_zinc)
    expected_mean, expected_variance = KrigingPredictor(meuse.xy, log_zinc, model, mean).predict(meuse_grid.xy)
    local = LocalKrigingPredictor(meuse.xy, log_zinc, model, mean, neighbours=len(log_zinc))
    predicted, variance = local.predict(meuse_grid.xy)
    np.testing.assert_allclose(predicted, expected_mean, rtol=0, atol=1e-9 * model.sill)
    np.testing.assert_allclose(variance, expected_variance, rtol=0, atol=1e-9 * model.sill)
    assert local.last_unresolved == 0


def test_external_drift_with_all_samples_is_global_kriging(meuse, meuse_grid, log_zinc):
    # Same identity with a covariate (square root of the distance to the river, published with the data).
    mean = mean_model("constant", meuse, log_zinc, covariate=True)
    covariate, covariate0 = np.sqrt(meuse.dist), np.sqrt(meuse_grid.dist)
    expected = KrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean, covariate).predict(meuse_grid.xy, covariate0)
    local = LocalKrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean, neighbours=155, covariates=covariate)
    np.testing.assert_allclose(local.predict(meuse_grid.xy, covariate0), expected, rtol=0, atol=1e-9)


@pytest.mark.parametrize("kind", ["known", "constant", "linear"])
def test_each_cell_is_kriging_on_its_own_neighbours(meuse, meuse_grid, log_zinc, kind):
    # Brute force by definition: sort the samples by the model's anisotropic scaled distance (the search ellipse),
    # keep the 12 nearest within 600 m along the major axis, krige from those alone with the global predictor.
    mean = mean_model(kind, meuse, log_zinc)
    radius, k = 600.0, 12
    local = LocalKrigingPredictor(meuse.xy, log_zinc, ANISOTROPIC, mean, neighbours=k, search_radius=radius)
    cells = meuse_grid.xy[::5]
    predicted, variance = local.predict(cells, chunk_size=97)
    structure = ANISOTROPIC.structures[0]
    unresolved = 0
    for index, cell in enumerate(cells):
        reach = structure.scaled_distance(*(meuse.xy - cell).T) * structure.range
        nearest = np.argsort(reach, kind="stable")[:k]
        nearest = nearest[reach[nearest] <= radius]
        if len(nearest) < mean.n_terms + 1:
            assert np.isnan(predicted[index]) and np.isnan(variance[index])
            unresolved += 1
            continue
        expected = KrigingPredictor(meuse.xy[nearest], log_zinc[nearest], ANISOTROPIC, mean).predict(cell[None])
        np.testing.assert_allclose([predicted[index], variance[index]], np.ravel(expected), rtol=0, atol=1e-10)
    assert local.last_unresolved == unresolved
    assert 0 < unresolved < len(cells)  # the radius leaves some cells without enough samples, not all


def test_neighbouring_cells_share_their_systems(meuse, log_zinc):
    # A fine lattice around one sample: most cells have the same 10 nearest samples, so most cells are solved
    # through the shared inverse; the results must equal those of solving every cell alone (chunks of one cell).
    mean = mean_model("linear", meuse, log_zinc)
    local = LocalKrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean, neighbours=10)
    side = np.linspace(-30.0, 30.0, 25)
    cells = meuse.xy[40] + np.stack(np.meshgrid(side, side), axis=-1).reshape(-1, 2)
    together = local.predict(cells)
    alone = local.predict(cells, chunk_size=1)
    np.testing.assert_allclose(together, alone, rtol=0, atol=1e-10)


@pytest.mark.parametrize("kind", MEAN_KINDS)
@pytest.mark.parametrize("model", [MEUSE_LOG_ZINC, ANISOTROPIC], ids=["spherical", "anisotropic"])
def test_fewer_neighbours_never_shrink_the_variance(meuse, meuse_grid, log_zinc, kind, model):
    # The kriging predictor has the smallest error variance among unbiased linear predictors (Cressie 1993,
    # section 3.4; Goldberger 1962, JASA 57). The 8 nearest samples are a subset of the 64 nearest, which are a
    # subset of all, so the smaller set's predictor is a candidate for the larger: variance(k=8) >= variance(k=64)
    # >= variance(global), up to round-off. Each target searches its own nearest (tile_spacings=None), which makes
    # the sets nested.
    mean = mean_model(kind, meuse, log_zinc)
    _, global_variance = KrigingPredictor(meuse.xy, log_zinc, model, mean).predict(meuse_grid.xy)
    _, wide = LocalKrigingPredictor(meuse.xy, log_zinc, model, mean, neighbours=64,
                                    tile_spacings=None).predict(meuse_grid.xy)
    _, narrow = LocalKrigingPredictor(meuse.xy, log_zinc, model, mean, neighbours=8,
                                      tile_spacings=None).predict(meuse_grid.xy)
    round_off = 1e-9 * model.sill
    assert np.all(wide >= global_variance - round_off)
    assert np.all(narrow >= wide - round_off)
    assert np.mean(narrow - global_variance) > 1e-3 * model.sill  # and the effect is there


def test_sixty_four_neighbours_match_global_simple_kriging(meuse, meuse_grid, log_zinc):
    # Screening effect (Stein 2002, Ann. Statist. 30(1), 298-323): for a smooth covariance the nearest samples
    # carry nearly all the weight, so 64 neighbours (common practice) reproduce global simple kriging within 1 %
    # of the sill at every Meuse grid cell. (Local ORDINARY kriging re-estimates the mean in every neighbourhood,
    # so away from the samples it departs further from global ordinary kriging, which uses one mean: it is a
    # different predictor and is not held to this bound.)
    model = CovarianceModel((Structure("matern32", 0.6, 300.0),), 0.05)
    mean = mean_model("known", meuse, log_zinc)
    expected_mean, expected_variance = KrigingPredictor(meuse.xy, log_zinc, model, mean).predict(meuse_grid.xy)
    predicted, variance = LocalKrigingPredictor(meuse.xy, log_zinc, model, mean, neighbours=64).predict(meuse_grid.xy)
    assert np.max(np.abs(predicted - expected_mean)) < 0.01 * model.sill
    assert np.max(np.abs(variance - expected_variance)) < 0.01 * model.sill


def test_nugget_progress_and_cancel(meuse, meuse_grid, log_zinc):
    mean = mean_model("constant", meuse, log_zinc)
    local = LocalKrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean, neighbours=16)
    fractions = []
    _, latent = local.predict(meuse_grid.xy, chunk_size=1000, progress=fractions.append)
    _, measured = local.predict(meuse_grid.xy, include_nugget=True)
    np.testing.assert_allclose(measured - latent, MEUSE_LOG_ZINC.nugget, rtol=1e-12)
    assert fractions[-1] == 1.0 and len(fractions) == 4
    with pytest.raises(Cancelled):
        local.predict(meuse_grid.xy, should_stop=lambda: True)


def test_bad_settings_say_what_to_change(meuse, log_zinc):
    linear = mean_model("linear", meuse, log_zinc)
    with pytest.raises(FieldcastError, match="at least 4"):
        LocalKrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, linear, neighbours=3)
    with pytest.raises(FieldcastError, match="search radius must be a positive"):
        LocalKrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, linear, search_radius=0.0)
    with pytest.raises(FieldcastError, match="NaN"):
        LocalKrigingPredictor(meuse.xy, np.where(np.arange(155) == 3, np.nan, log_zinc), MEUSE_LOG_ZINC, linear)


def test_clearly_negative_local_variance_is_refused_with_advice(meuse, meuse_grid, log_zinc, monkeypatch):
    # Constructed case: every neighbourhood solve reports a variance one sill below zero.
    local = LocalKrigingPredictor(meuse.xy, log_zinc, MEUSE_LOG_ZINC, mean_model("constant", meuse, log_zinc),
                                  neighbours=16)
    solve = local._predict_group

    def below_zero(*args):
        mean, variance = solve(*args)
        return mean, variance - MEUSE_LOG_ZINC.sill

    monkeypatch.setattr(local, "_predict_group", below_zero)
    with pytest.raises(FieldcastError, match="clearly negative.*neighbourhood system.*nugget"):
        local.predict(meuse_grid.xy[:20])


def test_distinct_rows_groups_exactly_even_on_a_hash_collision():
    rng = np.random.default_rng(3)
    rows = np.sort(rng.integers(0, 50, size=(400, 6)), axis=1)
    rows[200:] = rows[:200][rng.permutation(200)]  # every row twice
    distinct, inverse = distinct_rows(rows)
    np.testing.assert_array_equal(distinct[inverse], rows)
    assert len(distinct) == len(np.unique(rows, axis=0))
    # Two rows whose 64-bit hashes are equal: their difference (0, 2^63) times the weights is 0 modulo 2^64 when
    # the second weight is even, as it is for the fixed seed; the exact check must still keep them apart.
    clash = np.array([[0, 2 ** 62], [0, -2 ** 62]], dtype=np.int64)
    weights = np.random.default_rng(ROW_HASH_SEED).integers(1, 2 ** 62, size=2, dtype=np.int64)
    assert (clash @ weights)[0] == (clash @ weights)[1], "the fixed seed no longer gives this collision"
    distinct, inverse = distinct_rows(clash)
    assert len(distinct) == 2 and np.array_equal(distinct[inverse], clash)
