"""Starting values of a two-structure (short- plus long-range) model for the Vecchia fit at large n.

A one-structure fit on all samples with the Vecchia likelihood tends to find the short scale (each sample's
conditioning set holds its nearest neighbours), while an exact fit on a sparse subset tends to find the long one
(its samples are far apart). Three starts for the nested model follow, both in the fit's internal units:

1. the one-structure Vecchia fit as the short structure, and a long one read off the empirical semivariogram
   of the least-squares residuals at large lags (:func:`long_structure`);
2. the one-structure Vecchia fit as the short structure and the subset's fit as the long one;
3. the one-structure Vecchia fit as the long structure (:data:`LONG_SHARE` of its partial sill) and a short one
   of range :data:`SHORT_START_SPACINGS` smallest sample spacings with the rest, for when the one-structure fit
   found the long scale.

A start shares the nugget and the anisotropy of the one-structure Vecchia fit; the caller keeps the start with
the higher Vecchia likelihood.
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np

from ..model.correlation import reach_factor
from ..model.covariance import CovarianceModel, Structure
from .search import SearchProblem
from .variogram import empirical_semivariogram

VARIOGRAM_SAMPLES = 3000
"""Residuals (drawn at random, fixed seed) of the semivariogram behind the long structure's start."""

LARGE_LAGS = 5
"""The last this many of the semivariogram's 15 lags give its plateau."""

LEAST_LONG_SHARE = 0.25
"""Least share of the plateau given to the long structure's partial sill."""

SHORT_START_SPACINGS = 3.0
"""Range of the third start's short structure, in smallest sample spacings."""

LONG_SHARE = 0.7
"""Share of the one-structure fit's partial sill the third start gives its long structure."""


def long_structure(problem: SearchProblem, short: CovarianceModel) -> Structure:
    """A long-range structure of ``short``'s family and anisotropy from the semivariogram at large lags.

    The residuals' empirical semivariogram (:func:`.variogram.empirical_semivariogram`, default cutoff: a third
    of the bounding-box diagonal) at its last :data:`LARGE_LAGS` lags, averaged by pair count, is the plateau
    ``P``. The long structure's partial sill is what ``P`` leaves above the short model's sill (at least
    :data:`LEAST_LONG_SHARE` of ``P``); its effective range is the first lag distance where the semivariogram
    reaches the short sill plus 90 % of that partial sill (the cutoff when none does).
    """
    residual = problem.y - problem.basis.q @ (problem.basis.q.T @ problem.y)
    keep = np.random.default_rng(0).choice(len(residual), min(VARIOGRAM_SAMPLES, len(residual)), replace=False)
    variogram = empirical_semivariogram(problem.xy[keep], residual[keep])
    filled = variogram.pairs > 0
    gamma, distance, pairs = variogram.gamma[filled], variogram.distance[filled], variogram.pairs[filled]
    plateau = float(np.average(gamma[-LARGE_LAGS:], weights=pairs[-LARGE_LAGS:]))
    partial_sill = max(plateau - short.sill, LEAST_LONG_SHARE * plateau)
    reached = np.flatnonzero(gamma >= short.sill + 0.9 * partial_sill)
    reach = float(distance[reached[0]]) if reached.size else variogram.cutoff
    first = short.structures[0]
    reach_scale = reach_factor(first.family, first.smoothness)
    return replace(first, partial_sill=partial_sill, range=max(reach / reach_scale, 2.0 * first.range))


def two_scale_starts(problem: SearchProblem, single: CovarianceModel,
                     subset: CovarianceModel) -> list[CovarianceModel]:
    """The three starts of the module docstring (internal units): short structure first in each."""
    short = single.structures[0]
    subset_long = replace(short, partial_sill=subset.structures[-1].partial_sill,
                          range=max(subset.structures[-1].range, 2.0 * short.range))
    spacing = SHORT_START_SPACINGS * problem.internal_scales.smallest_spacing
    finer = replace(short, partial_sill=(1.0 - LONG_SHARE) * short.partial_sill, range=min(spacing, 0.5 * short.range))
    coarser = replace(short, partial_sill=LONG_SHARE * short.partial_sill)
    pairs = ((short, long_structure(problem, single)), (short, subset_long), (finer, coarser))
    return [CovarianceModel(pair, single.nugget) for pair in pairs]
