"""Warnings about what the samples can resolve (algorithms/fit/data_warnings.py): too few samples, no structure.

The white-noise and structured fields below are a simulation study: invented values drawn from known models
on a regular 70 m grid of 100 points.
"""
from __future__ import annotations

import numpy as np
import pytest

from fieldcast.algorithms.fit.data_warnings import (
    median_neighbour_distance,
    sample_size_warning,
    unresolved_structure_warning,
)
from fieldcast.algorithms.fit.fitting import fit_model, fit_with
from fieldcast.algorithms.fit.options import FitOptions
from fieldcast.algorithms.fit.shared import fit_shared
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from reference import gaussian_field

SPACING = 70.0
GRID = np.array([(x, y) for x in np.arange(10) * SPACING for y in np.arange(10) * SPACING])


def unresolved(warnings: list[str]) -> list[str]:
    return [w for w in warnings if "resolve no spatial structure" in w]


def test_the_median_neighbour_distance_of_a_regular_grid_is_its_spacing():
    assert median_neighbour_distance(GRID) == pytest.approx(SPACING)


def test_the_sample_size_warning_starts_below_thirty_samples_and_calls_itself_a_rule_of_thumb():
    # Common practice: variogram estimation wants 50 to 100 samples or more (a rule of thumb).
    assert sample_size_warning(30) == []
    (message,) = sample_size_warning(29)
    assert message.startswith("Only 29 samples") and "rule of thumb" in message


def test_a_structure_shorter_than_the_spacing_is_reported_with_both_distances():
    # Exponential practical range: exp(-r) = 0.05 at r = ln 20, so a = 20 m reaches 20 ln 20 = 59.91 m.
    short = CovarianceModel((Structure("exponential", 1.0, 20.0),), 1e-6)
    (message,) = unresolved_structure_warning(short, GRID, "m")
    assert "59.91 m (effective range)" in message and "70 m" in message
    assert unresolved_structure_warning(CovarianceModel((Structure("exponential", 1.0, 30.0),), 0.1), GRID) == []


def test_white_noise_fits_warn_that_no_structure_is_resolved():
    # Simulation study: independent standard normal values, so no structure exists at any scale.
    flagged = 0
    for seed in range(8):
        values = np.random.default_rng(seed).standard_normal(len(GRID))
        result = fit_model(GRID, values, kernel="exponential", anisotropy=False)
        short = result.covariance.structures[0].effective_range < SPACING
        assert bool(unresolved(result.warnings)) == short
        flagged += short
    # Most white-noise fits put the structure below the spacing; the rest find a weak long one.
    assert flagged >= 4


def test_a_field_correlated_well_beyond_the_spacing_gets_no_such_warning():
    # Simulation study: exponential covariance, effective range 600 m against 70 m spacing.
    model = CovarianceModel((Structure("exponential", 1.0, 200.0),), 0.1)
    values = gaussian_field(model, GRID, np.random.default_rng(3), mean=5.0)
    result = fit_model(GRID, values, kernel="exponential", anisotropy=False)
    assert unresolved(result.warnings) == []
    assert not any(w.startswith("Only ") for w in result.warnings)


@pytest.mark.parametrize("fit", ["single", "shared"])
def test_the_fits_say_distances_in_the_units_they_are_given_and_coordinate_units_otherwise(fit):
    # Simulation study: independent standard normal values (seed 1), whose exponential fit puts its range on the
    # lower bound, below the 70 m spacing: both the unresolved-structure and the bound warning quote distances.
    values = np.random.default_rng(1).standard_normal(len(GRID))
    both = np.column_stack([values, 2.0 * values])

    def warnings(options: FitOptions) -> list[str]:
        if fit == "single":
            return fit_with(GRID, values, options).warnings
        return fit_shared(GRID, both, options, ["a", "b"])[0].warnings

    settings = {"kernel": "exponential", "anisotropy": False}
    in_feet = [w for w in warnings(FitOptions(**settings, units="US survey foot")) if "US survey foot" in w]
    assert len(unresolved(in_feet)) == 1 and any(w.startswith("The range hit its lower bound") for w in in_feet)
    assert any("70 coordinate units" in w for w in unresolved(warnings(FitOptions(**settings))))
