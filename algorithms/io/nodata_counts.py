"""Counting the cells a Float32 GeoTIFF would hold as nodata for a reason other than the mask.

:class:`..io.geotiff.GeoTiffWriter` stores NaN, infinite values and values beyond the Float32 range
(about ±3.4e38, IEEE 754 single precision) as nodata. A raster that is nodata nearly everywhere although its
cells were computed is a sign of a model or data in the wrong units: :class:`NodataCounts` counts such cells
per raster, refuses a raster with no value at all (:meth:`NodataCounts.error`) and words a warning for one
that is mostly nodata (:meth:`NodataCounts.warnings`).
"""
from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass

import numpy as np

from ..errors import FieldcastError

FLOAT32_MAX = float(np.finfo(np.float32).max)
UNWRITABLE_REASON = (f"the values there are not numbers or lie beyond \u00b1{FLOAT32_MAX:.3g}, the range of the "
                     "Float32 GeoTIFF. Check the model's sill and partial sills (refit with 'Fit covariance model'), "
                     "or rescale the attribute to larger units.")


def unwritable(values: np.ndarray) -> np.ndarray:
    """True where a value is NaN, infinite or beyond the Float32 range (stored as nodata)."""
    values = np.asarray(values, dtype=float)
    return ~(np.isfinite(values) & (np.abs(values) <= FLOAT32_MAX))


@dataclass(frozen=True)
class NodataCounts:
    """What a run's rasters leave nodata among the cells it computed (those inside the mask).

    Attributes
    ----------
    computed : int
        Cells computed (inside the mask).
    unresolved : int
        Of those, cells left NaN on purpose (a local neighbourhood with too few samples in range).
    unwritable : dict of str to int
        Per raster name, resolved cells whose value is not a number or beyond the Float32 range, stored as
        nodata.
    no_covariate : int
        Cells inside the mask left nodata (not computed) because a covariate raster has no value there, or a
        class no sample has.
    """

    computed: int
    unresolved: int
    unwritable: dict[str, int]
    no_covariate: int = 0

    @classmethod
    def of_rasters(cls, rasters: Mapping[str, np.ndarray], inside: np.ndarray | None,
                   unresolved: np.ndarray) -> NodataCounts:
        """Counts for whole rasters: ``rasters`` maps names to arrays (..., n_rows, n_cols) (a cell counts as
        unwritable when any of its bands is), ``inside`` is the cell mask (None: every cell) and ``unresolved``
        the (n_rows, n_cols) cells left NaN on purpose."""
        keep = np.ones(unresolved.shape, bool) if inside is None else inside
        resolved = keep & ~unresolved
        lost = {}
        for name, values in rasters.items():
            bad = np.zeros(keep.shape, bool)
            for band in np.reshape(values, (-1, *keep.shape)):  # band by band: no copy of all realisations
                bad |= unwritable(band)
            lost[name] = int(np.count_nonzero(resolved & bad))
        return cls(int(np.count_nonzero(keep)), int(np.count_nonzero(keep & unresolved)), lost)

    @classmethod
    def total(cls, parts: Iterable[NodataCounts]) -> NodataCounts:
        """The counts of a run made of ``parts`` (one per block): every count summed, raster by raster."""
        parts = list(parts)
        lost: dict[str, int] = {}
        for part in parts:
            for name, count in part.unwritable.items():
                lost[name] = lost.get(name, 0) + count
        return cls(sum(part.computed for part in parts), sum(part.unresolved for part in parts), lost,
                   sum(part.no_covariate for part in parts))

    def warnings(self, share: float = 0.5) -> list[str]:
        """A warning for each raster nodata at more than ``share`` of its resolved cells (not the mask's doing)."""
        resolved = self.computed - self.unresolved
        lines = [f"The {name} raster is nodata at {count:,} of {resolved:,} computed cells: {UNWRITABLE_REASON}"
                 for name, count in self.unwritable.items() if count > share * resolved]
        if self.no_covariate:
            lines.append(f"{self.no_covariate:,} cells of the map area are nodata because a covariate raster has no "
                         "value there (nodata, outside the raster, or a class no sample has, whose coefficient "
                         "cannot be estimated).")
        return lines

    def error(self) -> FieldcastError | None:
        """The refusal for rasters that would hold no value at any resolved cell, None when every raster holds some."""
        resolved = self.computed - self.unresolved
        if self.no_covariate and not self.computed:
            return FieldcastError("No cell of the map area has a value in every covariate raster (or a class the "
                                  "samples have). Choose covariate rasters that cover the map area, or another "
                                  "EXTENT or TEMPLATE.")
        empty = [name for name, count in self.unwritable.items() if resolved and count == resolved]
        if not empty:
            return None
        return FieldcastError(f"The {', '.join(empty)} raster(s) would be nodata at every cell: {UNWRITABLE_REASON}")
