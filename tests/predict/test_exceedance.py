"""Exceedance probabilities: the normal-distribution formula, log models, and agreement with simulation."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.io.grid import GridSpec
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.exceedance import exceedance_probability
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.simulate.simulation import simulate_conditional, summarise_realisations
from reference import MEUSE_LOG_ZINC

ZINC_THRESHOLD = 500.0  # ppm


def test_equals_the_normal_upper_tail():
    # Reference: scipy.stats.norm(loc=mean, scale=sd).sf(threshold), the upper tail of the normal law.
    rng = np.random.default_rng(0)
    mean = rng.normal(10.0, 3.0, size=200)
    variance = rng.uniform(0.1, 9.0, size=200)
    probability = exceedance_probability(mean, variance, 11.0)
    assert np.allclose(probability, stats.norm(loc=mean, scale=np.sqrt(variance)).sf(11.0), rtol=1e-12)
    # a new measurement adds the nugget to the variance
    measured = exceedance_probability(mean, variance, 11.0, target="measurement", nugget=0.5)
    assert np.allclose(measured, stats.norm(loc=mean, scale=np.sqrt(variance + 0.5)).sf(11.0), rtol=1e-12)


def test_log_model_equals_the_lognormal_upper_tail():
    # Reference: scipy.stats.lognorm(s=sd, scale=exp(mean)) is the law of Z + offset when ln(Z + offset) is
    # normal (Aitchison & Brown 1957, The Lognormal Distribution); P(Z > t) = lognorm.sf(t + offset).
    rng = np.random.default_rng(1)
    mean = rng.normal(5.5, 0.5, size=100)
    variance = rng.uniform(0.05, 0.6, size=100)
    transform = Transform("log", offset=2.0)
    probability = exceedance_probability(mean, variance, ZINC_THRESHOLD, transform=transform)
    reference = stats.lognorm(s=np.sqrt(variance), scale=np.exp(mean)).sf(ZINC_THRESHOLD + 2.0)
    assert np.allclose(probability, reference, rtol=1e-10)
    # every value of a log model exceeds a threshold at or below -offset
    assert np.all(exceedance_probability(mean, variance, -2.0, transform=transform) == 1.0)


def test_zero_variance_gives_certainty_and_bad_input_is_refused():
    probability = exceedance_probability(np.array([1.0, 3.0]), np.array([0.0, -1e-15]), 2.0)
    assert probability.tolist() == [0.0, 1.0]
    with pytest.raises(FieldcastError, match="target"):
        exceedance_probability(np.zeros(2), np.ones(2), 0.0, target="sample")
    with pytest.raises(FieldcastError, match="finite"):
        exceedance_probability(np.zeros(2), np.ones(2), float("nan"))


@pytest.fixture(scope="module")
def meuse_exceedance(meuse, meuse_grid):
    """Kriging, exceedance and 400 realisations of log(zinc) on the published 40 m Meuse grid."""
    xy = np.asarray(meuse.xy)
    values = np.log(meuse.zinc)
    mean_model = MeanModel.for_data("constant", xy)
    cells = np.asarray(meuse_grid.xy)
    grid = GridSpec.from_extent(cells[:, 0].min() - 20, cells[:, 1].min() - 20, cells[:, 0].max() + 20,
                                cells[:, 1].max() + 20, 40.0)
    column = np.rint((cells[:, 0] - grid.x_min) / 40.0 - 0.5).astype(int)
    row = np.rint((grid.y_max - cells[:, 1]) / 40.0 - 0.5).astype(int)
    mask = np.zeros((grid.n_rows, grid.n_cols), dtype=bool)
    mask[row, column] = True
    distance = np.full(mask.shape, np.nan)
    distance[row, column] = meuse_grid.dist
    mean, variance = KrigingPredictor(xy, values, MEUSE_LOG_ZINC, mean_model).predict(grid.cell_centres())
    probability = exceedance_probability(mean, variance, ZINC_THRESHOLD, transform=Transform("log"))
    result = simulate_conditional(xy, values, MEUSE_LOG_ZINC, mean_model, grid, n_realisations=400, seed=500,
                                  transform=Transform("log"))
    summary = summarise_realisations(result.realisations, grid.pixel_size ** 2, threshold=ZINC_THRESHOLD,
                                     mask=mask)
    return probability.reshape(mask.shape), summary, mask, distance


def test_meuse_exceedance_is_high_along_the_river_and_low_far_from_it(meuse_exceedance):
    # Meuse data (Rikken & Van Rijn 1993): zinc comes with flood sediment, so concentrations are highest next
    # to the river (small `dist`) and fall with distance from it (Burrough & McDonnell 1998).
    probability, _, mask, distance = meuse_exceedance
    near = mask & (distance < 0.05)
    far = mask & (distance > 0.5)
    assert probability[near].mean() > 0.6
    assert probability[far].mean() < 0.1
    rank_correlation = stats.spearmanr(probability[mask], distance[mask]).correlation
    assert rank_correlation < -0.5


def test_simulated_share_above_agrees_with_the_exceedance_formula(meuse_exceedance):
    # The share of R independent realisations above the threshold estimates the probability with standard
    # error sqrt(p (1 - p) / R) (binomial); 5 standard errors (plus 1/R) bound the largest of 3103 cells.
    probability, summary, mask, _ = meuse_exceedance
    count = 400
    gap = np.abs(summary.share_above[mask] - probability[mask])
    bound = 5 * np.sqrt(probability[mask] * (1 - probability[mask]) / count) + 1.0 / count
    assert np.all(gap <= bound)
    assert abs(np.mean(summary.share_above[mask] - probability[mask])) < 0.01


def test_every_realisation_area_above_lies_between_zero_and_the_mask_area(meuse_exceedance):
    _, summary, mask, _ = meuse_exceedance
    assert summary.mask_area == pytest.approx(3103 * 1600.0)  # 3103 cells of 40 m x 40 m (dataset documentation)
    assert np.all(summary.area_above > 0.0)
    assert np.all(summary.area_above < summary.mask_area)
    # zinc above 500 ppm covers a minority of the flood plain: 57 of the 155 samples exceed it, and the
    # sampling is denser along the river bank than far from it (Meuse data).
    assert 0.05 < np.median(summary.area_above) / summary.mask_area < 57 / 155
