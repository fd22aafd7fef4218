"""Conditional realisations honour the data and converge to the kriging mean and variance."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import special

from fieldcast.algorithms.errors import Cancelled, FieldcastError
from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.predict.local import LocalKrigingPredictor
from fieldcast.algorithms.simulate import simulation
from fieldcast.algorithms.simulate.conditioning import SampleDraw, choose_neighbourhood
from fieldcast.algorithms.simulate.simulation import simulate_conditional, simulation_lattice, summarise_realisations
from reference import MEUSE_LOG_ZINC


def meuse_grid_spec(pixel: float) -> GridSpec:
    # Extent of the Meuse samples; edges on multiples of the pixel, as the published 40 m grid has.
    return GridSpec.from_extent(178500.0, 329600.0, 181600.0, 333700.0, pixel)


def assert_converges_to_kriging(realisations: np.ndarray, mean: np.ndarray, variance: np.ndarray,
                                field_variance: float) -> None:
    """Per-cell Monte Carlo mean and variance match kriging within Monte Carlo error.

    With R independent realisations the realisation mean has standard error sqrt(variance / R) and the
    sample variance sqrt(2 / (R - 1)) * variance (normal theory). 5 standard errors bound the largest of
    some thousand correlated cells (common practice).
    """
    count = len(realisations)
    flat = realisations.reshape(count, -1)
    standardised = (flat.mean(axis=0) - mean) / np.sqrt(variance / count)
    assert np.max(np.abs(standardised)) < 5.0
    assert abs(np.mean(standardised)) < 1.0
    informative = variance > 0.05 * field_variance
    ratio = flat.var(axis=0, ddof=1)[informative] / variance[informative]
    assert np.max(np.abs(ratio - 1.0)) < 5 * np.sqrt(2.0 / (count - 1))
    assert abs(np.mean(ratio) - 1.0) < 0.05


@pytest.fixture(scope="module")
def meuse_log_zinc(meuse):
    return np.asarray(meuse.xy), np.log(meuse.zinc)


def simulate_meuse(meuse_log_zinc, kind: str, pixel: float, count: int, seed: int,
                   **options) -> simulation.SimulationResult:
    """Realisations of Meuse log(zinc) under MEUSE_LOG_ZINC with a ``kind`` mean on the samples' extent."""
    xy, values = meuse_log_zinc
    return simulate_conditional(xy, values, MEUSE_LOG_ZINC, MeanModel.for_data(kind, xy), meuse_grid_spec(pixel),
                                n_realisations=count, seed=seed, **options)


def test_meuse_realisations_converge_to_ordinary_kriging(meuse_log_zinc):
    # Conditioning by kriging gives realisations whose mean is the kriging prediction and whose variance is
    # the kriging variance (Journel & Huijbregts 1978, Mining Geostatistics); Meuse data (Rikken & Van Rijn
    # 1993) with a nugget, samples off the cell centres.
    xy, values = meuse_log_zinc
    mean_model = MeanModel.for_data("constant", xy)
    grid = meuse_grid_spec(80.0)
    result = simulate_conditional(xy, values, MEUSE_LOG_ZINC, mean_model, grid, n_realisations=600, seed=20)
    assert result.method == "circulant embedding" and result.warnings == []
    assert result.realisations.shape == (600, grid.n_rows, grid.n_cols)
    mean, variance = KrigingPredictor(xy, values, MEUSE_LOG_ZINC, mean_model).predict(grid.cell_centres())
    assert_converges_to_kriging(result.realisations, mean, variance, MEUSE_LOG_ZINC.field_variance)


def test_anisotropic_universal_kriging_with_samples_off_the_grid():
    # Same check for an anisotropic exponential model without nugget and a linear trend; the samples lie
    # between cell centres and some outside the grid, so the lattice is extended to hold them.
    rng = np.random.default_rng(4)
    xy = rng.uniform([0.0, 0.0], [900.0, 700.0], size=(60, 2))
    values = 0.002 * xy[:, 0] + np.sin(xy[:, 1] / 150.0)
    model = CovarianceModel((Structure("exponential", 1.0, 250.0, azimuth=60.0, ratio=0.4),))
    mean_model = MeanModel.for_data("linear", xy)
    grid = GridSpec(100.0, 600.0, 25.0, 28, 20)  # covers x 100..800, y 100..600: some samples outside
    result = simulate_conditional(xy, values, model, mean_model, grid, n_realisations=600, seed=8)
    mean, variance = KrigingPredictor(xy, values, model, mean_model).predict(grid.cell_centres())
    assert_converges_to_kriging(result.realisations, mean, variance, model.field_variance)


def test_local_conditioning_with_all_samples_is_the_global_conditioning(meuse_log_zinc):
    # With every sample as neighbour and the trend re-estimated in the neighbourhood (local_mean) the local
    # kriging weights are the global ones (Cressie 1993, Statistics for Spatial Data, 3.2), so the same seed
    # gives the same realisations up to round-off; Meuse data.
    dense = simulate_meuse(meuse_log_zinc, "linear", 160.0, 4, 5)
    local = simulate_meuse(meuse_log_zinc, "linear", 160.0, 4, 5, neighbours=len(meuse_log_zinc[0]),
                           local_mean=True)
    assert local.unresolved == 0
    assert any("re-estimated in each neighbourhood (LOCAL_MEAN)" in note for note in local.notes)
    np.testing.assert_allclose(local.realisations, dense.realisations, rtol=0, atol=1e-8)


def test_meuse_local_realisations_converge_to_local_kriging(meuse_log_zinc):
    # Conditioning by kriging reproduces the kriging mean and variance of the weights it uses (Journel &
    # Huijbregts 1978, Mining Geostatistics): with 32 neighbours, those of local kriging; Meuse data.
    xy, values = meuse_log_zinc
    mean_model = MeanModel.for_data("constant", xy)
    result = simulate_meuse(meuse_log_zinc, "constant", 80.0, 200, 31, neighbours=32)
    mean, variance = LocalKrigingPredictor(xy, values, MEUSE_LOG_ZINC, mean_model,
                                           neighbours=32).predict(meuse_grid_spec(80.0).cell_centres())
    assert_converges_to_kriging(result.realisations, mean, variance, MEUSE_LOG_ZINC.field_variance)


def test_cells_beyond_the_search_radius_are_nodata_and_left_out_of_summaries(meuse_log_zinc):
    # A 200 m search leaves the corners of the Meuse extent without samples: NaN in every realisation.
    grid = meuse_grid_spec(160.0)
    result = simulate_meuse(meuse_log_zinc, "constant", 160.0, 3, 2, neighbours=16, search_radius=200.0)
    missing = np.isnan(result.realisations)
    assert (missing == missing[0]).all()
    assert 0 < result.unresolved == int(missing[0].sum()) < grid.n_cells
    summary = summarise_realisations(result.realisations, 160.0 ** 2, threshold=6.0)
    assert np.isnan(summary.mean[missing[0]]).all() and np.isnan(summary.share_above[missing[0]]).all()
    assert np.isfinite(summary.mean[~missing[0]]).all()
    assert summary.mask_area == 160.0 ** 2 * (grid.n_cells - result.unresolved)
    np.testing.assert_allclose(summary.mask_mean, result.realisations[:, ~missing[0]].mean(axis=1))
    # Counted inside a mask: the western half keeps only its own unresolved cells (counted by hand here).
    west = np.zeros(missing[0].shape, dtype=bool)
    west[:, : west.shape[1] // 2] = True
    assert result.unresolved_cells() == result.unresolved
    assert result.unresolved_cells(west) == int(missing[0][:, : west.shape[1] // 2].sum())
    assert result.unresolved_cells(np.zeros_like(west)) == 0


def test_data_on_cell_centres_are_honoured_exactly_without_nugget():
    # Without nugget the kriging predictor interpolates (Cressie 1993, Statistics for Spatial Data, 3.2),
    # so every conditional realisation equals the datum at the cell holding it.
    grid = GridSpec(0.0, 500.0, 10.0, 50, 50)
    cells = np.random.default_rng(1).choice(grid.n_cells, size=40, replace=False)
    xy = grid.cell_centres()[cells]
    values = np.cos(xy[:, 0] / 80.0) + xy[:, 1] / 400.0
    model = CovarianceModel((Structure("matern32", 0.8, 120.0, azimuth=10.0, ratio=0.7),))
    result = simulate_conditional(xy, values, model, MeanModel.for_data("constant", xy), grid,
                                  n_realisations=5, seed=2)
    at_data = result.realisations.reshape(5, -1)[:, cells]
    assert np.max(np.abs(at_data - values[None, :])) < 1e-6


def test_sample_draw_reproduces_sample_to_node_covariance(meuse_log_zinc):
    # The neighbourhood draw is exact among samples and on the neighbourhood nodes; beyond them the
    # sample-to-node covariance error stays under 1% of the field variance for the Meuse design
    # (screening effect, Stein 2002, Ann. Statist. 30(1), 298-323).
    xy, _ = meuse_log_zinc
    grid = meuse_grid_spec(40.0)
    rows, cols = choose_neighbourhood(grid, xy)
    lattice, row_offset, col_offset = simulation_lattice(grid, rows, cols)
    draw = SampleDraw(MEUSE_LOG_ZINC, lattice, xy, rows + row_offset, cols + col_offset)
    assert draw.side == 4
    assert draw.largest_cross_covariance_error(window=10) < 0.01


def test_seed_makes_runs_reproducible_and_log_models_back_transform_cell_by_cell(meuse_log_zinc):
    first = simulate_meuse(meuse_log_zinc, "constant", 160.0, 3, 7)
    again = simulate_meuse(meuse_log_zinc, "constant", 160.0, 3, 7, transform=Transform("log"))
    other = simulate_meuse(meuse_log_zinc, "constant", 160.0, 3, 8)
    # ln is inverted by exp cell by cell (Transform.back_median is exp(y) - offset).
    assert np.allclose(again.realisations, np.exp(first.realisations), rtol=1e-12)
    assert not np.allclose(first.realisations, other.realisations)


def test_boxcox_and_normal_score_realisations_back_transform_one_by_one(meuse_log_zinc, meuse):
    # Each realisation of the modelling-scale field goes through the inverse transform cell by cell: Box-Cox
    # inverse (lambda y + 1)^(1/lambda) as scipy.special.inv_boxcox gives it; normal scores through the knots.
    first = simulate_meuse(meuse_log_zinc, "constant", 160.0, 2, 7)
    boxcox = simulate_meuse(meuse_log_zinc, "constant", 160.0, 2, 7, transform=Transform("boxcox", 0.0, 0.25))
    np.testing.assert_allclose(boxcox.realisations, special.inv_boxcox(first.realisations, 0.25), rtol=1e-12)
    scores = Transform.normal_score(meuse.zinc)
    xy, _ = meuse_log_zinc
    plain, normal = (simulate_conditional(xy, scores.forward(meuse.zinc), MEUSE_LOG_ZINC, MeanModel.for_data(
        "constant", xy), meuse_grid_spec(160.0), n_realisations=2, seed=7, transform=transform)
        for transform in (None, scores))
    z, y = np.array(scores.knots).T
    assert np.ptp(plain.realisations) > 2.0  # the scores span the knots, not only a tail
    np.testing.assert_allclose(normal.realisations, np.interp(plain.realisations, y, z), rtol=1e-12)


def test_progress_and_cancel(meuse_log_zinc):
    xy, values = meuse_log_zinc
    mean_model = MeanModel.for_data("constant", xy)
    grid = meuse_grid_spec(160.0)
    assert grid.n_cells <= 4096  # one block of kriging weights (the default chunk size)
    fractions = []
    simulate_conditional(xy, values, MEUSE_LOG_ZINC, mean_model, grid, n_realisations=6, seed=1,
                         progress=fractions.append)
    # One report after each of the 6 realisations, then one for the single block: 7 steps in all.
    assert fractions == pytest.approx([step / 7 for step in range(1, 8)])
    reports = []

    def stop_after_three_realisations() -> bool:
        return len(reports) >= 3

    with pytest.raises(Cancelled):
        simulate_conditional(xy, values, MEUSE_LOG_ZINC, mean_model, grid, n_realisations=6, seed=1,
                             progress=reports.append, should_stop=stop_after_three_realisations)
    # The cancel took effect between the third and the fourth realisation, inside a drawn pair.
    assert reports == pytest.approx([1 / 7, 2 / 7, 3 / 7])
    with pytest.raises(FieldcastError, match="number of realisations"):
        simulate_conditional(xy, values, MEUSE_LOG_ZINC, mean_model, grid, n_realisations=0)
    flat_model = CovarianceModel((Structure("spherical", 0.0, 900.0),), nugget=0.6)
    with pytest.raises(FieldcastError, match="no spatial structure"):
        simulate_conditional(xy, values, flat_model, mean_model, grid, n_realisations=2)
    with pytest.raises(FieldcastError, match="fewer realisations"):
        simulate_conditional(xy, values, MEUSE_LOG_ZINC, mean_model, grid, n_realisations=10, max_bytes=1000.0)


@pytest.mark.parametrize("rows_at_a_time", [64, 3])
def test_summaries_match_their_definitions(monkeypatch, rows_at_a_time):
    # Reference: numpy's own mean, std (ddof=1) and linear-interpolation quantiles over realisations.
    monkeypatch.setattr(simulation, "SUMMARY_ROWS", rows_at_a_time)
    rng = np.random.default_rng(0)
    stack = rng.lognormal(size=(50, 4, 5))
    mask = np.ones((4, 5), dtype=bool)
    mask[0] = False
    summary = summarise_realisations(stack, cell_area=25.0, threshold=1.5, mask=mask)
    assert np.allclose(summary.mean, stack.mean(axis=0))
    assert np.allclose(summary.std, stack.std(axis=0, ddof=1))
    assert np.allclose(summary.p10, np.percentile(stack, 10, axis=0))
    assert np.allclose(summary.p90, np.percentile(stack, 90, axis=0))
    assert np.allclose(summary.share_above, (stack > 1.5).mean(axis=0))
    assert np.allclose(summary.area_above, 25.0 * (stack[:, 1:] > 1.5).sum(axis=(1, 2)))
    assert np.allclose(summary.mask_mean, stack[:, 1:].mean(axis=(1, 2)))
    assert summary.mask_area == 25.0 * 15
    # Percentile p of R sorted values at position (R - 1) p / 100, linearly interpolated (Hyndman & Fan 1996, def. 7).
    areas = np.sort(summary.area_above)
    for percent, found in zip((10, 50, 90), summary.area_percentiles((10, 50, 90))):
        position = (len(areas) - 1) * percent / 100
        low = int(np.floor(position))
        expected = areas[low] + (position - low) * (areas[min(low + 1, len(areas) - 1)] - areas[low])
        assert found == pytest.approx(expected, rel=1e-12)
    with pytest.raises(FieldcastError, match="THRESHOLD"):
        summarise_realisations(stack, 25.0, mask=mask).area_percentiles((50,))
    with pytest.raises(FieldcastError, match="mask"):
        summarise_realisations(stack, 25.0, mask=np.ones((3, 3), dtype=bool))


def test_realisations_honour_the_data_within_their_error_variances():
    # With per-sample error variances e the realisations still converge to the kriging mean and variance of the
    # same system (Journel & Huijbregts 1978: conditioning by kriging, here with diag(e) added to K and drawn at the
    # samples); at a datum's cell they spread by its latent kriging variance, which lies below the datum's own error
    # variance, so each realisation honours the datum within its error and no more tightly. Simulation study on
    # invented data: samples on cell centres, error variances 0.01 to 0.09.
    grid = GridSpec(0.0, 400.0, 10.0, 40, 40)
    cells = np.random.default_rng(3).choice(grid.n_cells, size=50, replace=False)
    xy = grid.cell_centres()[cells]
    values = np.cos(xy[:, 0] / 70.0) + xy[:, 1] / 300.0
    error_variance = 0.01 + 0.02 * (np.arange(50) % 5)
    model = CovarianceModel((Structure("exponential", 0.8, 120.0),))
    mean_model = MeanModel.for_data("constant", xy)
    result = simulate_conditional(xy, values, model, mean_model, grid, n_realisations=600, seed=12,
                                  error_variance=error_variance)
    predictor = KrigingPredictor(xy, values, model, mean_model, error_variance=error_variance)
    mean, variance = predictor.predict(grid.cell_centres())
    assert_converges_to_kriging(result.realisations, mean, variance, model.field_variance)
    assert np.all(variance[cells] > 0) and np.all(variance[cells] < error_variance)
    spread = result.realisations.reshape(600, -1)[:, cells].var(axis=0)
    assert np.mean(spread / error_variance) < 0.9
