"""The ordering and the conditioning sets of Vecchia's approximation (:mod:`.vecchia`).

Ordering. Exact maximin (Guinness 2018, *Technometrics* 60(4), 415-429, who
found it gives markedly better approximations than coordinate or random
orderings): the first sample is the one nearest the centroid, and each next
one is the remaining sample farthest from all samples placed so far (its
*gap*, ``gap_j = min over placed p of |x_j - x_p|``; among equal gaps the
lower index). Every sample thus comes after a cover of the region at its own
spacing, so its previous neighbours surround it and some lie far away (they
carry the long scales). Placing sample ``i`` at gap ``l_i`` can only lower the
gaps of samples within ``l_i`` of it (every remaining gap is at most ``l_i``),
so each placement updates those and no others. Distances are
``numpy.hypot(dx, dy)`` throughout, so equal gaps are equal floats and the
order is a pure function of the coordinates. Two phases:

* early (while the largest gap is at least the :data:`EARLY_SHARE` quantile
  of the samples' :data:`NEAR_COUNT`-th neighbour distances, and above 0):
  the samples sorted by square cells (only the occupied ones kept), so the
  disc around ``i`` is a few contiguous runs (one per occupied row of cells),
  updated in place by ``numpy.minimum``; the largest gap is found from the
  maxima of blocks of :data:`GAP_BLOCK` samples;
* late: each sample's :data:`NEAR_COUNT` nearest samples, found once by one
  k-d tree query, hold every sample within ``l_i`` of ``i`` while ``l_i`` is
  below the last one's distance (else a ball query of the tree); the largest
  gap comes from a heap whose entries may be stale (a gap only falls, so a
  stored gap is an upper bound: an entry whose stored gap is the current one
  is the largest, and a stale one goes back with its current gap). Gaps are
  handled as the integer bit patterns of the non-negative floats, which sort
  as the floats do, so a heap key packs gap and index into one integer.

About ``O(n log n)`` updates in all (``l_k`` falls like ``k^-1/2`` for a
spread-out set); coincident samples come last, by index.

Neighbours. The ``m`` nearest earlier samples of each sample, nearest first,
equal distances by the lower position in the ordering (distances as
:class:`scipy.spatial.cKDTree` computes them, ``sqrt(dx^2 + dy^2)``: the same
float for the same pair in every tree, and equal on a lattice with whole
offsets). The former search (a tree of all earlier blocks of 1,024 plus a
direct search within the block) left the order of equal distances to the
partial sort and the tree; the sets agree wherever distances differ. Searched
in the anisotropy frame of a structure when :class:`.vecchia.VecchiaPlan` is
given one, in blocks of positions ``[s, GROWTH s)``: one tree of all samples
before the block's end, each sample of the block asks for
``NEIGHBOUR_SURPLUS m`` nearest and keeps the earlier ones; a sample whose
``m``-th earlier candidate is not strictly nearer than the farthest one
returned (an earlier sample at that distance may be missing) asks again with
twice as many, until the answer is certain.
"""
from __future__ import annotations

import bisect
import heapq
import math

import numpy as np
from scipy.spatial import cKDTree

from ..errors import FieldcastError, FieldcastUsageError

NEAR_COUNT = 20
"""Nearest samples listed per sample for the late phase of the ordering (of 12, 16, 20, 25, 30 and 50, measured at
10^5 scattered samples, among the fastest)."""

EARLY_SHARE = 0.1
"""The early phase of the ordering runs while the largest gap is at least this quantile of the samples'
:data:`NEAR_COUNT`-th neighbour distances."""

CELL_SCALE = 6.0
"""Side of the early phase's cells in units of the gap that ends it (of 1, 2, 4, 6, 8 and 12 measured, among the
fastest)."""

GAP_BLOCK = 64
"""Samples per block of the early phase's block maxima."""

GROWTH = 1.2
"""Each block of the neighbour search ends at this multiple of its start (with :data:`NEIGHBOUR_SURPLUS`, the
fastest of the pairs 1.1-1.25 / 1.2-1.6 measured at 10^5 scattered samples)."""

NEIGHBOUR_SURPLUS = 1.4
"""Candidates asked per neighbour sought: the earlier share of a block's tree is at least 1 / GROWTH."""

FIRST_BLOCK = 4
"""The first block of the neighbour search holds this many times ``m`` positions (all of its tree is searched)."""

ROWS_PER_QUERY = 8192
"""Samples whose candidates are searched at once (bounds temporary memory to a few tens of MB)."""

_BELOW = 1.0 - 1e-9
"""Shrinks a k-d tree's farthest returned distance to a bound no unreturned sample can be within (the tree and
``hypot`` may round the same distance a few units in the last place apart)."""

_PLACED = -1
"""The gap (bit pattern) of a placed sample: below every distance, so no update reaches it."""


def _bits(distance: np.ndarray) -> np.ndarray:
    """The int64 bit patterns of non-negative float64 distances (same order as the floats)."""
    return np.ascontiguousarray(distance, dtype=np.float64).view(np.int64)


def _bits_of(distance: float) -> int:
    """The bit pattern of one non-negative float distance."""
    return int(np.float64(distance).view(np.int64))


def _distance(bits: int) -> float:
    """The float whose bit pattern is ``bits``."""
    return float(np.int64(bits).view(np.float64))


def _nearest_lists(points: np.ndarray, tree: cKDTree) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Each sample's :data:`NEAR_COUNT` nearest samples sorted by hypot distance (itself included).

    Returns the indices (n, k), their distance bits (n, k) and the reach (n,): the float distance below which the
    list holds every sample (infinite when it holds all).
    """
    n = len(points)
    k = min(NEAR_COUNT, n)
    near = tree.query(points, k=k, workers=-1)[1].reshape(n, k)
    distance = np.hypot(points[near, 0] - points[:, None, 0], points[near, 1] - points[:, None, 1])
    by_distance = np.argsort(distance, axis=1, kind="stable")
    near = np.take_along_axis(near, by_distance, axis=1)
    distance = np.take_along_axis(distance, by_distance, axis=1)
    reach = np.full(n, np.inf) if k == n else distance[:, -1] * _BELOW
    return near, _bits(distance), reach


class _CellGaps:
    """The gaps of the early phase: samples sorted by square cells of side ``side``, gaps as bit patterns."""

    def __init__(self, points: np.ndarray, gap: np.ndarray, side: float) -> None:
        """Cells of ``side`` (0: from the bounding box) over ``points``, holding their float gaps ``gap``."""
        low = points.min(axis=0)
        self.low_x, self.low_y = float(low[0]), float(low[1])
        extent = points.max(axis=0) - low
        if side == 0.0:  # no spacing known: about one sample per cell of the bounding box
            side = max(math.sqrt(float(extent[0] * extent[1]) / len(points)), float(extent.max()) / len(points))
        # at most 2^30 cells along an axis, so a cell's id (row << 31 | column) fits an int64; only occupied cells
        # are kept, so small cells cost nothing where there are no samples
        self.side = max(side, float(extent.max()) / 2 ** 30) or 1.0
        column = ((points[:, 0] - self.low_x) // self.side).astype(np.int64)
        row = ((points[:, 1] - self.low_y) // self.side).astype(np.int64)
        cell = (row << 31) | column  # the cells of a row from one column to another have consecutive ids
        n = len(points)
        self.sample = np.argsort(cell, kind="stable")  # sample at each cell-sorted position
        self.position = np.empty(n, dtype=np.intp)
        self.position[self.sample] = np.arange(n)
        self.cells = cell[self.sample].tolist()
        self.occupied_rows = np.unique(row).tolist()
        self.x = points[self.sample, 0]
        self.y = points[self.sample, 1]
        self.margin = 1e-9 * float(np.abs(points).max())  # rounding of the cell index, in coordinate units
        blocks = -(-n // GAP_BLOCK)
        self.padded = np.full(blocks * GAP_BLOCK, _PLACED, dtype=np.int64)
        self.padded[:n] = _bits(gap[self.sample])
        self.gap = self.padded[:n]
        self.by_block = self.padded.reshape(blocks, GAP_BLOCK)
        self.block_max = self.by_block.max(axis=1)

    def largest(self) -> tuple[int, int]:
        """The remaining sample of largest gap (lowest index among equal ones) and that gap's bits.

        ``(-1, _PLACED)`` when all are placed.
        """
        block = int(self.block_max.argmax())
        top = int(self.block_max[block])
        if top == _PLACED:
            return -1, top
        hits = np.flatnonzero(self.by_block[block] == top)
        if len(hits) == 1 and np.count_nonzero(self.block_max == top) == 1:
            return int(self.sample[block * GAP_BLOCK + hits[0]]), top
        tied = (np.flatnonzero(self.block_max == top)[:, None] * GAP_BLOCK + np.arange(GAP_BLOCK)).ravel()
        tied = tied[self.padded[tied] == top]
        return int(self.sample[tied].min()), top

    def place(self, i: int, radius: float) -> None:
        """Mark sample ``i`` placed and lower the gaps of the samples within ``radius`` of it."""
        here = self.position[i]
        self.gap[here] = _PLACED
        x, y = float(self.x[here]), float(self.y[here])
        reach = radius * (1.0 + 1e-9) + self.margin
        first_column = max(int((x - reach - self.low_x) // self.side), 0)
        last_column = min(int((x + reach - self.low_x) // self.side), (1 << 31) - 1)
        rows = self.occupied_rows[bisect.bisect_left(self.occupied_rows, int((y - reach - self.low_y) // self.side)):
                                  bisect.bisect_right(self.occupied_rows, int((y + reach - self.low_y) // self.side))]
        cells, gap, xs, ys, by_block, block_max = self.cells, self.gap, self.x, self.y, self.by_block, self.block_max
        for row in rows:
            start = bisect.bisect_left(cells, (row << 31) | first_column)
            end = bisect.bisect_right(cells, (row << 31) | last_column)
            if start == end:
                continue
            gaps = gap[start:end]
            np.minimum(gaps, np.hypot(xs[start:end] - x, ys[start:end] - y).view(np.int64), out=gaps)
            blocks = slice(start // GAP_BLOCK, (end - 1) // GAP_BLOCK + 1)
            block_max[blocks] = by_block[blocks].max(axis=1)

    def in_sample_order(self) -> np.ndarray:
        """The gap bits indexed by sample."""
        gap = np.empty(len(self.gap), dtype=np.int64)
        gap[self.sample] = self.gap
        return gap


def maximin_order(points: np.ndarray) -> np.ndarray:
    """Exact maximin ordering of the points (see module docstring).

    Parameters
    ----------
    points : ndarray of shape (n, 2)
        Finite coordinates, n >= 1.

    Returns
    -------
    ndarray of shape (n,)
        A permutation: ``order[0]`` is the sample nearest the centroid (lower index on ties) and ``order[i]`` is,
        among the samples not in ``order[:i]``, one farthest from them (ties broken by the lower index).
    """
    points = np.asarray(points, dtype=float)
    if points.ndim != 2 or points.shape[1] != 2 or len(points) == 0 or not np.isfinite(points).all():
        raise FieldcastError("The Vecchia ordering needs at least one sample with finite coordinates (n, 2); "
                             "remove samples without coordinates.")
    first = int(np.argmin(np.hypot(*(points - points.mean(axis=0)).T)))
    gap = np.hypot(*(points - points[first]).T)
    tree = cKDTree(points)
    near, near_distance, reach = _nearest_lists(points, tree)
    early_end = float(np.quantile(reach, EARLY_SHARE)) if np.isfinite(reach).all() else math.inf
    cells = _CellGaps(points, gap, CELL_SCALE * early_end if math.isfinite(early_end) else 0.0)  # 0: unknown
    cells.place(first, 0.0)
    order = [first]
    # infinite when every list holds all samples (no early phase); at least 1, the smallest positive float, so
    # zero gaps (repeats of placed samples) are left to the heap
    end_bits = max(_bits_of(early_end), 1)
    while True:
        i, top = cells.largest()
        if top < end_bits:  # also when all are placed (_PLACED)
            break
        order.append(i)
        cells.place(i, _distance(top))
    gaps = cells.in_sample_order()
    remaining = np.flatnonzero(gaps != _PLACED).tolist()
    order.extend(_late_phase(points, tree, gaps.tolist(), remaining, near, near_distance, reach))
    return np.array(order, dtype=np.intp)


def _late_phase(points: np.ndarray, tree: cKDTree, gap: list[int], remaining: list[int], near: np.ndarray,
                near_distance: np.ndarray, reach: np.ndarray) -> list[int]:
    """The maximin order of the ``remaining`` samples, given their gap bits ``gap`` to those placed before."""
    shift = max(len(points).bit_length(), 1)
    index_mask = (1 << shift) - 1
    ceiling = 1 << 63  # key = (ceiling - gap) << shift | index: the smallest key is the largest gap, lowest index
    heap = [((ceiling - gap[i]) << shift) | i for i in remaining]
    heapq.heapify(heap)
    reach_bits = _bits(reach).tolist()
    order = []
    while heap:
        key = heap[0]
        i = key & index_mask
        placing = gap[i]
        if ceiling - (key >> shift) != placing:  # stale: the gap fell since this entry went in
            heapq.heapreplace(heap, ((ceiling - placing) << shift) | i)
            continue
        heapq.heappop(heap)
        order.append(i)
        if placing == 0:  # a repeat of a placed sample: every remaining gap is 0 too
            continue
        if placing < reach_bits[i]:
            for j, distance in zip(near[i].tolist(), near_distance[i].tolist()):
                if distance >= placing:
                    break
                if distance < gap[j]:
                    gap[j] = distance
        else:
            radius = _distance(placing)
            ball = tree.query_ball_point(points[i], radius * (1.0 + 1e-9))
            for j, distance in zip(ball, _bits(np.hypot(*(points[ball] - points[i]).T)).tolist()):
                if distance < gap[j]:
                    gap[j] = distance
    return order


def previous_neighbours(points: np.ndarray, m: int) -> tuple[np.ndarray, np.ndarray]:
    """The ``m`` nearest earlier points of every point of an ordered set.

    Parameters
    ----------
    points : ndarray of shape (n, 2)
        Points in their Vecchia order.
    m : int
        Neighbours per point (point ``i`` has ``min(i, m)``).

    Returns
    -------
    index : ndarray of int, shape (n, m)
        Positions (in the ordering) of the neighbours, nearest first, equal distances by the lower position;
        0 where missing.
    valid : ndarray of bool, shape (n, m)
        False where point ``i`` has fewer than ``m`` earlier points.
    """
    points = np.asarray(points, dtype=float)
    if points.ndim != 2 or points.shape[1] != 2 or int(m) != m or m < 0:
        raise FieldcastUsageError(f"previous_neighbours takes (n, 2) points and a whole m >= 0; got points of shape "
                                  f"{points.shape} and m={m!r}.")
    n, m = len(points), int(m)
    index = np.zeros((n, m), dtype=np.intp)
    valid = np.zeros((n, m), dtype=bool)
    start = 0
    while start < n and m > 0:
        end = min(n, max(math.ceil(start * GROWTH), FIRST_BLOCK * m))
        tree = cKDTree(points[:end])
        for first in range(start, end, ROWS_PER_QUERY):
            pending = np.arange(first, min(first + ROWS_PER_QUERY, end))
            asked = min(end, math.ceil(NEIGHBOUR_SURPLUS * m))
            while len(pending):
                chosen, count, certain = _nearest_earlier(tree, points, pending, asked, m)
                rows, width = pending[certain], chosen.shape[1]
                kept = np.arange(width) < count[certain, None]
                index[rows, :width] = np.where(kept, chosen[certain], 0)
                valid[rows, :width] = kept
                pending = pending[~certain]
                asked = min(end, 2 * asked)
        start = end
    return index, valid


def _nearest_earlier(tree: cKDTree, points: np.ndarray, rows: np.ndarray, asked: int,
                     m: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Of the ``asked`` nearest tree points of each point at position ``rows``, the earlier ones in neighbour order.

    Distances are the tree's (the same float for the same pair in every tree). Returns the first
    ``min(m, asked)`` candidates in that order (n_rows, width), how many of them are neighbours (``min(row, m)``)
    and whether the answer is certain: the tree returned all its points, or all earlier ones, or the last
    neighbour is strictly nearer than the farthest point returned (so no earlier point at its distance was left).
    """
    distance, candidate = (found.reshape(len(rows), asked) for found in
                           tree.query(points[rows], k=asked, workers=-1))
    earlier = candidate < rows[:, None]
    order = np.argsort(~earlier, axis=1, kind="stable")  # earlier ones first, nearest first as the tree sorts
    key = np.take_along_axis(np.where(earlier, distance, np.inf), order, axis=1)
    chosen = np.take_along_axis(candidate, order, axis=1)
    upto = min(m + 1, asked)  # equal distances among the kept ones or across the cut: order them by position
    tied = np.any((key[:, :upto - 1] == key[:, 1:upto]) & np.isfinite(key[:, 1:upto]), axis=1)
    if tied.any():
        by_position = np.argsort(chosen[tied], axis=1)
        again = np.argsort(np.take_along_axis(key[tied], by_position, axis=1), axis=1, kind="stable")
        chosen[tied] = np.take_along_axis(chosen[tied], np.take_along_axis(by_position, again, axis=1), axis=1)
    count = np.minimum(rows, m)
    found = earlier.sum(axis=1)
    last = key[np.arange(len(rows)), np.maximum(count - 1, 0)]
    certain = (count == 0) | (found == rows) | (asked == tree.n) | ((found >= count) & (last < distance[:, -1]))
    return chosen[:, :min(m, asked)], count, certain
