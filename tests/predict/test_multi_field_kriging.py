"""Several fields kriged at once (values of shape (n, m)) against one field at a time, on the published Meuse data.

Kriging is linear in the data and its weights and variance do not depend on the values (Cressie 1993, Statistics
for Spatial Data, rev. ed., section 3.4), so predicting m fields that share the sample points and the model with
one factorisation must give, column by column, the single-field predictions and the single-field variance. Every
check here is that identity.
"""
from __future__ import annotations

import numpy as np
import pytest

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from fieldcast.algorithms.predict.local import LocalKrigingPredictor
from reference import MEUSE_LOG_ZINC

# Search radius (m) that leaves some cells of the 40 m Meuse grid with too few samples for a linear trend.
SHORT_RADIUS = 150.0

CASES = [("known", False), ("constant", False), ("linear", False), ("constant", True)]
CASE_IDS = ["known", "constant", "linear", "external-drift"]


@pytest.fixture(scope="module")
def log_metals(meuse):
    """Log zinc, copper, lead and cadmium (columns of the published Meuse data), shape (155, 4)."""
    return np.log(np.column_stack([meuse.zinc, meuse.copper, meuse.lead, meuse.cadmium]))


def mean_model(kind, meuse, drift):
    # One known mean for every column (simple kriging takes a single value); 4.0 lies among the metals' log means.
    return MeanModel.for_data(kind, meuse.xy, ("sqrt_dist",) if drift else (), known_value=4.0)


@pytest.fixture(params=CASES, ids=CASE_IDS)
def case(request, meuse, meuse_grid):
    """Mean model of one case and the drift at the samples and the cells (None without external drift).

    The drift is the square root of the distance to the river, published with the data.
    """
    kind, drift = request.param
    covariate, covariate0 = (np.sqrt(meuse.dist), np.sqrt(meuse_grid.dist)) if drift else (None, None)
    return mean_model(kind, meuse, drift), covariate, covariate0


# Every metal uses the usual Meuse log-zinc model (tests/reference.py; from memory): the identity holds for any model.
def global_predictor(meuse, values, mean, covariate):
    return KrigingPredictor(meuse.xy, values, MEUSE_LOG_ZINC, mean, covariate)


def local_predictor(meuse, values, mean, covariate, search_radius=None):
    return LocalKrigingPredictor(meuse.xy, values, MEUSE_LOG_ZINC, mean, neighbours=16, search_radius=search_radius,
                                 covariates=covariate)


def assert_columns_match_single_fields(build, log_metals, xy0, covariate0):
    """Predict all columns at once with ``build(values)`` and compare with one predictor per column."""
    together = build(log_metals)
    mean, variance = together.predict(xy0, covariate0)
    assert mean.shape == (len(xy0), log_metals.shape[1])
    assert variance.shape == (len(xy0),)
    scale = float(np.max(np.abs(log_metals)))
    for column in range(log_metals.shape[1]):
        alone = build(log_metals[:, column])
        expected_mean, expected_variance = alone.predict(xy0, covariate0)
        assert expected_mean.shape == (len(xy0),)
        np.testing.assert_allclose(mean[:, column], expected_mean, rtol=0, atol=1e-10 * scale)
        np.testing.assert_allclose(variance, expected_variance, rtol=0, atol=1e-10 * MEUSE_LOG_ZINC.sill)
        assert np.array_equal(np.isnan(mean[:, column]), np.isnan(expected_mean))
    return together, mean, variance


def test_global_columns_equal_single_fields(meuse, meuse_grid, log_metals, case):
    mean, covariate, covariate0 = case
    together, _, _ = assert_columns_match_single_fields(
        lambda values: global_predictor(meuse, values, mean, covariate), log_metals, meuse_grid.xy, covariate0)
    assert together.coefficients.shape == (mean.n_terms, log_metals.shape[1])
    # Closed-form cross-validation uses Q y, one column per field; Q itself is shared.
    precision, precision_values = together.projected_precision()
    for column in range(log_metals.shape[1]):
        alone = global_predictor(meuse, log_metals[:, column], mean, covariate)
        np.testing.assert_allclose(together.coefficients[:, column], alone.coefficients, rtol=1e-10, atol=1e-12)
        alone_precision, alone_values = alone.projected_precision()
        np.testing.assert_array_equal(precision, alone_precision)
        np.testing.assert_allclose(precision_values[:, column], alone_values, rtol=1e-10,
                                   atol=1e-10 * float(np.max(np.abs(alone_values))))


def test_local_columns_equal_single_fields(meuse, meuse_grid, log_metals, case):
    mean, covariate, covariate0 = case
    together, _, variance = assert_columns_match_single_fields(
        lambda values: local_predictor(meuse, values, mean, covariate), log_metals, meuse_grid.xy, covariate0)
    assert together.last_unresolved == 0
    assert np.all(np.isfinite(variance))


def test_local_unresolved_cells_are_nan_in_every_column(meuse, meuse_grid, log_metals):
    mean = mean_model("linear", meuse, False)
    together, predicted, variance = assert_columns_match_single_fields(
        lambda values: local_predictor(meuse, values, mean, None, SHORT_RADIUS), log_metals, meuse_grid.xy, None)
    unresolved = np.isnan(variance)
    assert 0 < together.last_unresolved == np.count_nonzero(unresolved) < len(variance)
    assert np.array_equal(np.isnan(predicted), np.repeat(unresolved[:, None], log_metals.shape[1], axis=1))
    alone = local_predictor(meuse, log_metals[:, 0], mean, None, SHORT_RADIUS)
    alone.predict(meuse_grid.xy)
    assert alone.last_unresolved == together.last_unresolved


def test_local_leave_one_out_columns_equal_single_fields(meuse, log_metals):
    mean = mean_model("constant", meuse, False)
    predicted, variance = local_predictor(meuse, log_metals, mean, None).leave_one_out()
    assert predicted.shape == log_metals.shape
    for column in range(log_metals.shape[1]):
        expected_mean, expected_variance = local_predictor(meuse, log_metals[:, column], mean, None).leave_one_out()
        np.testing.assert_allclose(predicted[:, column], expected_mean, rtol=0,
                                   atol=1e-10 * float(np.max(np.abs(log_metals))))
        np.testing.assert_allclose(variance, expected_variance, rtol=0, atol=1e-10 * MEUSE_LOG_ZINC.sill)


def test_one_column_matrix_gives_a_column_of_means(meuse, meuse_grid, log_metals):
    # An (n, 1) matrix is one field given as a matrix: the mean keeps its column.
    mean = mean_model("constant", meuse, False)
    for build in (global_predictor, local_predictor):
        predicted, _ = build(meuse, log_metals[:, :1], mean, None).predict(meuse_grid.xy[:10])
        assert predicted.shape == (10, 1)


@pytest.mark.parametrize("build", [global_predictor, local_predictor], ids=["global", "local"])
@pytest.mark.parametrize(("make_values", "message"), [
    (lambda values: np.vstack([values, values[:1]]), r"Expected 155 sample values .*\(155, m\).*got .*\(156, 4\)"),
    (lambda values: values[:, :, None], r"\(155,\) for one field or \(155, m\).*got .*\(155, 4, 1\)"),
    (lambda values: values[:, :0], r"\(155, m\) for m fields.*got .*\(155, 0\)"),
    (lambda values: np.where((np.arange(155)[:, None] == 10) & (np.arange(4) == 2), np.nan, values),
     r"1 sample value\(s\) \(in column\(s\) 2\) are NaN or infinite; drop those samples or fill them in"),
], ids=["extra-row", "three-dimensional", "no-column", "nan-inside"])
def test_bad_value_shapes_are_refused(meuse, log_metals, build, make_values, message):
    with pytest.raises(FieldcastError, match=message):
        build(meuse, make_values(log_metals), mean_model("constant", meuse, False), None)
