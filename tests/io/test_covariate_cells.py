"""The covariate mean of a fit, the cells covariates leave usable, and the residuals from a fitted mean (Meuse)."""
from __future__ import annotations

import numpy as np
import pytest

from fieldcast.algorithms import CellCovariates, FieldcastError, GridSpec, covariate_mean


def test_covariate_mean_names_its_columns_and_refuses_a_repeated_covariate(meuse):
    dist = np.sqrt(meuse.dist)[:, None]
    mean = covariate_mean("linear", meuse.xy, ("sqrt_dist",), dist)
    assert mean.term_names == ("1", "u", "v", "sqrt_dist")
    with pytest.raises(FieldcastError, match="'twice' is a combination.*Remove one of them from COVARIATES"):
        covariate_mean("constant", meuse.xy, ("sqrt_dist", "twice"), np.hstack([dist, 2 * dist]))


def test_residuals_are_the_values_minus_the_least_squares_trend(meuse):
    # Ordinary least squares (numpy's lstsq) leaves residuals orthogonal to every design column (the normal
    # equations), so with its coefficients F^T r = 0.
    dist = np.sqrt(meuse.dist)[:, None]
    mean = covariate_mean("linear", meuse.xy, ("sqrt_dist",), dist)
    values = np.log(meuse.zinc)
    coefficients = np.linalg.lstsq(mean.design(meuse.xy, dist), values, rcond=None)[0]
    residuals = mean.residuals(meuse.xy, values, coefficients, dist)
    np.testing.assert_allclose(mean.design(meuse.xy, dist).T @ residuals, 0.0, atol=1e-8)
    assert np.std(residuals) < np.std(values)


def test_cells_without_a_covariate_value_leave_the_mask_and_are_counted():
    grid = GridSpec.from_extent(0.0, 0.0, 3.0, 2.0, 1.0)  # 2 rows, 3 columns
    columns = np.arange(12.0).reshape(6, 2)
    columns[1, 0] = np.nan
    columns[4, 1] = np.nan
    inside = np.array([[True, True, False], [True, False, True]])
    cells = CellCovariates.of(columns, grid, inside)
    np.testing.assert_array_equal(cells.inside, [[True, False, False], [True, False, True]])
    assert cells.missing == 1  # cell 4 was outside the mask already
    assert np.all(np.isfinite(cells.columns)) and np.all(cells.columns[[1, 4]] == 0.0)
    with pytest.raises(FieldcastError, match="No cell of the grid has a value in every covariate raster"):
        CellCovariates.of(np.full((6, 2), np.nan), grid, None)
