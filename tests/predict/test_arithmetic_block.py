"""Cell support for log models: the cell's arithmetic average in attribute units, against fine simulations.

Meuse log-zinc (published data, tests/data/README.md) with the one Meuse model of tests/reference.py. The
reference draws a fine 10 x 10 discretisation of each cell from the exact conditional Gaussian law of the
points given the data (ordinary kriging with its Lagrange multiplier, Cressie 1993, section 3.2) and averages
exp(.) per draw: a Monte Carlo estimate of the cell's arithmetic average and of its exceedance probability.
"""
from __future__ import annotations

import numpy as np
import pytest

from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.block import arithmetic_block_predict, block_offsets, block_predict
from fieldcast.algorithms.predict.exceedance import exceedance_probability
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from reference import MEUSE_LOG_ZINC, ordinary_joint_law

CELL = 100.0
CENTRES = np.array([[179850.0, 330650.0], [180250.0, 331650.0], [180550.0, 332450.0]])
DRAWS = 4000
THRESHOLD = 500.0


def test_cell_support_of_a_log_model_is_the_arithmetic_average_of_fine_simulations(meuse):
    y = np.log(meuse.zinc)
    predictor = KrigingPredictor(meuse.xy, y, MEUSE_LOG_ZINC, MeanModel("constant"))
    mu, s2 = arithmetic_block_predict(predictor, CENTRES, CELL)
    log_mean, log_variance = block_predict(predictor, CENTRES, CELL)
    transform = Transform("log")
    mean = transform.back_mean(mu, s2)
    exceedance = exceedance_probability(mu, s2, THRESHOLD, transform=transform)
    rng = np.random.default_rng(8)
    for cell, centre in enumerate(CENTRES):
        coarse_mu, coarse_joint, _ = ordinary_joint_law(meuse.xy, y, MEUSE_LOG_ZINC, centre + block_offsets(CELL, 4))
        # exact lognormal moments of the average of the 4 x 4 points (Aitchison & Brown 1957)
        point_means = np.exp(coarse_mu + np.diag(coarse_joint) / 2)
        assert mean[cell] == pytest.approx(point_means.mean(), rel=1e-8)
        variance = np.mean(np.outer(point_means, point_means) * np.expm1(coarse_joint))
        assert transform.back_variance(mu[cell], s2[cell]) == pytest.approx(variance, rel=1e-7)
        fine_mu, fine_joint, _ = ordinary_joint_law(meuse.xy, y, MEUSE_LOG_ZINC, centre + block_offsets(CELL, 10))
        averages = np.exp(rng.multivariate_normal(fine_mu, fine_joint, size=DRAWS, method="eigh")).mean(axis=1)
        # Monte Carlo error of the mean: 4 standard errors, plus 1 % for 4 x 4 against 10 x 10 points (common practice)
        assert mean[cell] == pytest.approx(averages.mean(), abs=4 * averages.std() / np.sqrt(DRAWS)
                                           + 0.01 * averages.mean())
        p = float(np.mean(averages > THRESHOLD))
        # binomial Monte Carlo error (4 sd) plus 0.03 for the moment-matched lognormal (an allowance chosen here)
        assert exceedance[cell] == pytest.approx(p, abs=4 * np.sqrt(max(p * (1 - p), 1e-4) / DRAWS) + 0.03)
    # the average of the logs, back-transformed, lies below the arithmetic average (Jensen's inequality)
    assert np.all(transform.back_mean(log_mean, log_variance) < mean)
