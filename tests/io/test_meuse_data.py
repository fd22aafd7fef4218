"""The converted Meuse CSV files match the published facts about the data set."""
from __future__ import annotations

import numpy as np


def test_sample_count_and_ids(meuse):
    # Dataset documentation (data/meuse.rda in Debian's r-cran-sp; survey of Rikken & Van Rijn 1993,
    # used in Burrough & McDonnell 1998): 155 observations.
    assert meuse.xy.shape == (155, 2)
    assert np.array_equal(meuse.ids, np.arange(1, 156))
    for values in (meuse.zinc, meuse.copper, meuse.lead, meuse.cadmium, meuse.elev, meuse.dist):
        assert values.shape == (155,)
        assert np.all(np.isfinite(values))


def test_zinc_summary(meuse):
    # Zinc min 113, median 326, max 1839 ppm: the summary of the Meuse zinc values as usually printed
    # for this data set (Rikken & Van Rijn 1993 survey as distributed with Burrough & McDonnell 1998);
    # the figures are from memory, the dataset documentation itself does not list them.
    assert np.min(meuse.zinc) == 113
    assert np.median(meuse.zinc) == 326
    assert np.max(meuse.zinc) == 1839


def test_distance_is_normalised(meuse, meuse_grid):
    # Dataset documentation: dist is the distance to the river normalised to [0, 1].
    for dist in (meuse.dist, meuse_grid.dist):
        assert dist.min() >= 0.0 and dist.max() <= 1.0


def test_grid_has_3103_cells_at_40_m(meuse_grid):
    # Dataset documentation (data/meuse.grid.rda): 3103 rows, a grid with 40 m x 40 m spacing.
    xy = meuse_grid.xy
    assert xy.shape == (3103, 2)
    assert len(np.unique(xy, axis=0)) == 3103
    for axis in (0, 1):
        offsets = xy[:, axis] - xy[:, axis].min()
        assert np.all(np.mod(offsets, 40.0) == 0.0)
        assert np.min(np.diff(np.unique(xy[:, axis]))) == 40.0


def test_samples_lie_inside_the_grid_extent(meuse, meuse_grid):
    # Dataset documentation: the grid "covers the Meuse study area"; half a cell (20 m) of slack.
    lower = meuse_grid.xy.min(axis=0) - 20.0
    upper = meuse_grid.xy.max(axis=0) + 20.0
    assert np.all((meuse.xy >= lower) & (meuse.xy <= upper))
