"""KERNEL=auto at large n compares one and two structures on the Vecchia likelihood.

Invented data (a simulation study): the two-scale gap case of tests/cloud_gaps.py on a 60 x 100 lattice, whose
true model is known because the field was drawn from it.
"""
from __future__ import annotations

import pytest

from cloud_gaps import cloud_gap_case
from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.fit.fit_log import fit_log_lines
from fieldcast.algorithms.fit.options import FitOptions
from fieldcast.algorithms.fit.vecchia_fit import fit_vecchia


@pytest.fixture(scope="module")
def two_scale_fit():
    case = cloud_gap_case((60, 100), seed=3)
    seen = case.observed
    options = FitOptions(kernel="auto", anisotropy=False, mean="linear", likelihood_neighbours=20)
    return case, fit_vecchia(case.xy[seen], case.values[seen], options, subset_size=400)


def test_auto_at_large_n_keeps_two_structures_when_the_data_have_two_scales(two_scale_fit):
    # Akaike 1974: the lower AIC wins; both candidates are scored on the same Vecchia REML likelihood. The drawn field
    # has a short (range 2) and a long (range 20) Matérn structure, so the two-structure model must win, and its
    # ranges must land near the true ones (within a factor 1.5: a judgement call for one 4,200-sample draw).
    case, result = two_scale_fit
    assert result.likelihood == "vecchia (20 neighbours)"
    assert sorted(len(c.covariance.structures) for c in result.candidates) == [1, 2]
    assert len(result.covariance.structures) == 2
    assert result.aic == min(c.aic for c in result.candidates)
    for fitted, true in zip(result.covariance.structures, case.covariance.structures):
        assert true.range / 1.5 < fitted.range < true.range * 1.5


def test_the_fit_log_lists_both_candidates(two_scale_fit):
    _, result = two_scale_fit
    lines = fit_log_lines(result, "km")
    rows = [line for line in lines if line.startswith("  ")]
    assert len(rows) == 2 and sum("two structures (short and long range)" in row for row in rows) == 1
    assert any("(chosen)" in row and "two structures" in row for row in rows)


@pytest.mark.parametrize("bad", [0, -3, 2.5, True])
def test_a_bad_likelihood_neighbour_count_says_what_to_change(bad):
    with pytest.raises(FieldcastError, match="LIKELIHOOD_NEIGHBOURS.*Give a positive whole number"):
        FitOptions(likelihood_neighbours=bad)
