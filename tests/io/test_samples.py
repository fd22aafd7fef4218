"""Merging coincident samples and the checks that stop unusable data."""
from __future__ import annotations

import numpy as np
import pytest

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.io.samples import check_samples, merge_coincident


def read_only(array) -> np.ndarray:
    array = np.array(array, dtype=float)
    array.setflags(write=False)
    return array


def test_merge_averages_exact_duplicates_and_keeps_first_id():
    xy = read_only([[0, 0], [1, 1], [0, 0], [2, 2], [1, 1], [0, 0]])
    values = read_only([1, 2, 3, 4, 5, 8])
    ids = np.array([10, 11, 12, 13, 14, 15])
    merged = merge_coincident(xy, values, ids)
    # Arithmetic means worked by hand: (1 + 3 + 8) / 3 = 4 at (0, 0); (2 + 5) / 2 = 3.5 at (1, 1).
    assert np.array_equal(merged.xy, [[0, 0], [1, 1], [2, 2]])
    assert np.array_equal(merged.values, [4.0, 3.5, 4.0])
    assert np.array_equal(merged.ids, [10, 11, 13])
    assert merged.merged_groups == 2
    assert merged.merged_points == 5
    assert np.array_equal(ids, [10, 11, 12, 13, 14, 15])


def test_merge_matches_numpy_unique_on_random_duplicates():
    # Reference: numpy.unique over rows groups exactly equal locations; the group means follow
    # from numpy.bincount. Locations on a 5 x 5 lattice guarantee many duplicates.
    rng = np.random.default_rng(3)
    xy = read_only(rng.integers(0, 5, size=(200, 2)) * 10.0)
    values = read_only(rng.normal(size=200))
    merged = merge_coincident(xy, values)
    locations, group = np.unique(xy, axis=0, return_inverse=True)
    group = group.ravel()
    means = np.bincount(group, weights=values) / np.bincount(group)
    order = np.lexsort((merged.xy[:, 1], merged.xy[:, 0]))
    assert np.array_equal(merged.xy[order], locations)
    assert np.allclose(merged.values[order], means)
    sizes = np.bincount(group)
    assert merged.merged_groups == np.count_nonzero(sizes > 1)
    assert merged.merged_points == sizes[sizes > 1].sum()
    assert len(merged.values) == 200 - merged.merged_points + merged.merged_groups
    # Every merged sample keeps the id (row number) of the first sample at its location.
    assert np.array_equal(xy[merged.ids], merged.xy)
    for first in merged.ids:
        assert first == np.flatnonzero(group == group[first])[0]


def test_merge_with_tolerance_joins_chains_of_near_points():
    xy = read_only([[0.0, 0.0], [0.4, 0.0], [0.8, 0.0], [5.0, 5.0]])
    values = read_only([1.0, 2.0, 6.0, 7.0])
    exact = merge_coincident(xy, values)
    assert exact.merged_groups == 0 and exact.merged_points == 0
    assert np.array_equal(exact.values, values)
    near = merge_coincident(xy, values, tolerance=0.5)
    # Single linkage: 0-0.4 and 0.4-0.8 are within 0.5, so all three join (mean 3).
    assert np.array_equal(near.values, [3.0, 7.0])
    assert np.array_equal(near.xy, [[0.0, 0.0], [5.0, 5.0]])
    assert (near.merged_groups, near.merged_points) == (1, 3)



@pytest.mark.parametrize("tolerance", [0.0, 0.3, 1.5])
def test_merge_groups_as_single_linkage_clustering_cut_at_the_tolerance(tolerance):
    # Reference: scipy.cluster.hierarchy single linkage cut with criterion="distance" joins samples whose
    # chain of links is at most t long, the groups merge_coincident defines. Points on a coarse lattice
    # with jitter give exact repeats and near neighbours.
    from scipy.cluster.hierarchy import fcluster, linkage

    rng = np.random.default_rng(11)
    xy = rng.integers(0, 8, size=(300, 2)) * 1.0
    xy[::3] += rng.uniform(0, 0.4, size=(100, 2))
    values = rng.normal(size=300)
    merged = merge_coincident(read_only(xy), read_only(values), tolerance=tolerance)
    reference = fcluster(linkage(xy, method="single"), t=tolerance, criterion="distance")
    first = np.array([np.flatnonzero(reference == label)[0] for label in np.unique(reference)])
    assert np.array_equal(np.sort(merged.ids), np.sort(first))
    means = {i: values[reference == reference[i]].mean() for i in first}
    assert np.allclose(merged.values, [means[i] for i in merged.ids])
    assert np.array_equal(merged.xy, xy[merged.ids])
    sizes = np.bincount(reference)
    assert (merged.merged_groups, merged.merged_points) == (np.count_nonzero(sizes > 1), sizes[sizes > 1].sum())


def test_fifty_thousand_samples_at_one_location_merge_into_one():
    # Before: a pair search listed all 1.25e9 pairs of the repeats and ran out of memory.
    xy = np.vstack([np.full((50_000, 2), [181_000.0, 333_000.0]), [[181_100.0, 333_100.0], [181_200.0, 333_000.0]]])
    values = np.concatenate([np.arange(50_000.0), [7.0, 9.0]])
    merged = merge_coincident(read_only(xy), read_only(values))
    # Mean of 0 .. 49,999 is 49,999 / 2 (arithmetic series).
    assert np.array_equal(merged.values, [49_999 / 2, 7.0, 9.0])
    assert np.array_equal(merged.ids, [0, 50_000, 50_001])
    assert (merged.merged_groups, merged.merged_points) == (1, 50_000)


@pytest.mark.parametrize(
    ("xy", "values", "kwargs", "words"),
    [
        ([[0, 0], [1, 1]], [1.0, 2.0, 3.0], {}, "one value per sample"),
        ([[0, 0, 0]], [1.0], {}, "(n, 2)"),
        ([[0, 0], [1, 1]], [1.0, 2.0], {"tolerance": -1.0}, "tolerance"),
        ([[0, 0], [np.nan, 1]], [1.0, 2.0], {}, "coordinates"),
    ],
)
def test_merge_rejects_bad_input(xy, values, kwargs, words):
    with pytest.raises(FieldcastError, match=words.replace("(", r"\(").replace(")", r"\)")):
        merge_coincident(np.array(xy, dtype=float), np.array(values), **kwargs)


def test_check_samples_accepts_good_data():
    check_samples(read_only([[0, 0], [1, 0], [0, 1]]), read_only([1.0, 2.0, 3.0]))


def test_check_samples_too_few():
    with pytest.raises(FieldcastError, match="only 2 usable samples; at least 3 are needed"):
        check_samples(np.array([[0.0, 0.0], [1.0, 0.0]]), np.array([1.0, 2.0]))
    # Samples without a value do not count as usable.
    with pytest.raises(FieldcastError, match=r"only 2 usable samples \(1 more have missing"):
        check_samples(np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]]), np.array([1.0, np.nan, 2.0]))


def test_check_samples_non_finite_values():
    xy = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0], [1.0, 1.0]])
    with pytest.raises(FieldcastError, match=r"1 sample value\(s\) are missing or infinite \(first at row 2"):
        check_samples(xy, np.array([1.0, 2.0, np.inf, 3.0]))


def test_check_samples_non_finite_coordinates():
    xy = np.array([[0.0, 0.0], [1.0, np.nan], [0.0, 1.0], [1.0, 1.0]])
    with pytest.raises(FieldcastError, match=r"1 sample\(s\) have missing or infinite coordinates \(first at row 1"):
        check_samples(xy, np.array([1.0, 2.0, 3.0, 4.0]))


def test_check_samples_constant_values():
    xy = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]])
    with pytest.raises(FieldcastError, match="All 3 values equal 2.5: there is nothing to interpolate"):
        check_samples(xy, np.full(3, 2.5))


def test_check_samples_refuses_values_whose_squares_overflow():
    values = np.linspace(1.0, 2.0, 20)
    values[[4, 9]] = [1e300, -3e60]
    xy = np.column_stack([np.arange(20.0), np.zeros(20)])
    with pytest.raises(FieldcastError) as error:
        check_samples(xy, values)
    for fragment in ("2 sample value(s) are beyond \u00b11e+50", "row 4: 1e+300", "Rescale the field",
                     "Field calculator", "TRANSFORM=log"):
        assert fragment in str(error.value)
    values[[4, 9]] = [1e50, -1e50]
    check_samples(xy, values)


def test_a_group_with_a_limit_is_a_limit_at_the_mean_of_its_entries():
    # Each true value lies at or below its entry, so their mean lies below the mean of the entries.
    xy = np.array([[0.0, 0.0], [0.0, 0.0], [1.0, 0.0], [2.0, 0.0], [2.0, 0.0]])
    merged = merge_coincident(xy, np.array([1.0, 3.0, 5.0, 2.0, 4.0]),
                              censored=np.array([True, False, False, False, False]))
    assert np.allclose(merged.values, [2.0, 5.0, 3.0])
    assert merged.censored.tolist() == [True, False, False]
    assert merge_coincident(xy, np.ones(5) + np.arange(5)).censored is None
