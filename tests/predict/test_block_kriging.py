"""Block kriging: averages of point kriging over a cell, with the block-to-block covariance in the variance."""
from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial import cKDTree
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Matern

from fieldcast.algorithms.errors import Cancelled, FieldcastError
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.predict.block import block_covariance, block_offsets, block_predict
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from reference import MEUSE_LOG_ZINC


def test_simple_block_kriging_equals_scikit_learn_posterior_averages():
    # Reference: scikit-learn's GaussianProcessRegressor with a zero prior mean (simple kriging) gives the
    # posterior mean and covariance of the latent field at the discretisation points; the block mean is their
    # mean, and the block variance the mean of the posterior covariance over all pairs of points.
    rng = np.random.default_rng(3)
    xy = rng.uniform(0.0, 1000.0, size=(40, 2))
    values = np.sin(xy[:, 0] / 200.0) + np.cos(xy[:, 1] / 300.0)
    sill, scale, nugget = 1.3, 220.0, 0.1
    model = CovarianceModel((Structure("exponential", sill, scale),), nugget)
    # Matern with nu = 1/2 is exp(-h / length_scale), the exponential family (Rasmussen & Williams 2006, eq. 4.14)
    kernel = ConstantKernel(sill, "fixed") * Matern(length_scale=scale, length_scale_bounds="fixed", nu=0.5)
    reference = GaussianProcessRegressor(kernel, alpha=nugget, optimizer=None, normalize_y=False).fit(xy, values)
    predictor = KrigingPredictor(xy, values, model, MeanModel("known", 0.0))
    centres = np.array([[100.0, 200.0], [512.0, 488.0], [900.0, 950.0]])
    pixel = 60.0
    mean, variance = block_predict(predictor, centres, pixel, points_per_side=4)
    for centre, block_mean, block_variance in zip(centres, mean, variance):
        points = centre + block_offsets(pixel, 4)
        posterior_mean, posterior_covariance = reference.predict(points, return_cov=True)
        assert block_mean == pytest.approx(posterior_mean.mean(), abs=1e-9)
        assert block_variance == pytest.approx(posterior_covariance.mean(), rel=1e-7)


def test_fine_discretisation_tends_to_the_average_of_point_predictions(meuse):
    # The block value is the integral of the field over the cell; the mean of point predictions on a 24 x 24
    # sub-grid approximates that integral (midpoint rule), and the block prediction converges to it as the
    # discretisation is refined. Meuse data (Rikken & Van Rijn 1993), ordinary kriging of log(zinc).
    xy = np.asarray(meuse.xy)
    predictor = KrigingPredictor(xy, np.log(meuse.zinc), MEUSE_LOG_ZINC, MeanModel.for_data("constant", xy))
    centres = np.array([[179500.0, 331000.0], [180620.0, 332100.0], [181100.0, 333500.0]])
    pixel = 200.0
    fine = np.array([predictor.predict(c + block_offsets(pixel, 24))[0].mean() for c in centres])
    errors = [np.max(np.abs(block_predict(predictor, centres, pixel, points_per_side=d)[0] - fine))
              for d in (1, 2, 4, 8)]
    assert errors[-1] < 0.1 * errors[0]
    assert errors[-1] < 1e-3
    coarse_variance = block_predict(predictor, centres, pixel, points_per_side=8)[1]
    fine_variance = block_predict(predictor, centres, pixel, points_per_side=16)[1]
    assert np.allclose(coarse_variance, fine_variance, rtol=0.02)


def test_block_variance_is_below_point_variance_away_from_samples(meuse, meuse_grid):
    # Averaging over a block removes the nugget and part of the short-range variation, so the block error
    # variance is below the point error variance (Journel & Huijbregts 1978, Mining Geostatistics) -- except
    # at a cell centre a few metres from a sample, where the point prediction leans on that sample (one cell of
    # the Meuse grid has a sample 2 m from its centre).
    xy = np.asarray(meuse.xy)
    predictor = KrigingPredictor(xy, np.log(meuse.zinc), MEUSE_LOG_ZINC, MeanModel.for_data("constant", xy))
    centres = np.asarray(meuse_grid.xy)
    _, point_variance = predictor.predict(centres)
    _, block_variance = block_predict(predictor, centres, 40.0)
    nearest = cKDTree(xy).query(centres)[0]
    away = nearest > 5.0
    assert np.count_nonzero(~away) < 10
    assert np.all(block_variance[away] < point_variance[away])
    assert block_covariance(MEUSE_LOG_ZINC, 40.0) < MEUSE_LOG_ZINC.field_variance


def test_one_point_per_block_is_point_kriging_with_a_trend(meuse):
    # A block discretised by its centre alone is the point at the centre, and C_BB is then C(0): block kriging
    # must reproduce universal (point) kriging exactly (the kriging equations of Cressie 1993, Statistics for
    # Spatial Data, section 3.4, as KrigingPredictor.predict solves them).
    xy = np.asarray(meuse.xy)
    predictor = KrigingPredictor(xy, np.log(meuse.zinc), MEUSE_LOG_ZINC, MeanModel.for_data("linear", xy))
    centres = np.array([[179500.0, 331000.0], [180620.0, 332100.0], [181100.0, 333500.0], xy[7]])
    point_mean, point_variance = predictor.predict(centres)
    block_mean, block_variance = block_predict(predictor, centres, 40.0, points_per_side=1)
    np.testing.assert_allclose(block_mean, point_mean, rtol=1e-12)
    np.testing.assert_allclose(block_variance, point_variance, rtol=1e-9, atol=1e-12)


def test_bad_input_and_cancel(meuse):
    xy = np.asarray(meuse.xy)
    predictor = KrigingPredictor(xy, np.log(meuse.zinc), MEUSE_LOG_ZINC, MeanModel.for_data("constant", xy))
    with pytest.raises(FieldcastError, match="points per side"):
        block_predict(predictor, xy[:2], 40.0, points_per_side=0)
    with pytest.raises(FieldcastError, match="must be an"):
        block_predict(predictor, xy[:, 0], 40.0)
    with pytest.raises(Cancelled):
        block_predict(predictor, xy[:2], 40.0, should_stop=lambda: True)
