"""How far a kriged grid reaches beyond what its samples and its model support: the checks of every surface run.

Three counts, made block by block while :func:`.grid_surfaces.write_surfaces` writes the rasters:

- **Outside the model.** Under the model the field at a cell is Gaussian with the trend ``m(x)`` as its mean and
  the total sill ``s2`` as its variance, and a kriging prediction (a conditional mean) varies less than the field
  itself. A prediction more than :data:`TAIL_SDS` standard deviations ``s`` from ``m(x)`` (modelling scale) has,
  under the model, a probability below ``2 * Phi(-6) = 1.97e-9`` (the standard normal tail, Abramowitz & Stegun
  1964, *Handbook of Mathematical Functions*, 26.2.17 and table 26.1), so in a grid of a million cells not even
  one is expected. Such values come from unstable kriging weights (a smooth family without nugget, large
  weights of opposite sign), not from the data; those cells are set to nodata and counted, so a map never shows
  them as predictions. ``m(x)`` is the mean model fitted to the samples by ordinary least squares (unbiased for
  the trend under the model; the known value for a known mean).
- **Beyond the effective range.** Cells farther than the effective range from every sample (for each
  structure, in its anisotropy frame): their prediction is essentially the trend and their variance the sill.
- **Outside the data range.** Cells whose prediction (attribute units, as written) is below the smallest or
  above the largest sample value.

The distance from each cell to its nearest sample (working CRS units, Euclidean) is also kept for the optional
distance raster.
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np
from scipy.spatial import cKDTree

from ..model.covariance import CovarianceModel, search_frame
from ..model.mean import MeanModel
from ..model.transform import Transform
from .choice import LogLine

TAIL_SDS = 6.0
"""Standard deviations of the model from its trend beyond which a prediction is not one the model allows
(two-sided standard normal tail 1.97e-9; see the module docstring)."""
EXTRAPOLATION_SHARE = 0.01
"""Share of the mapped cells beyond the effective range, or outside the data range, above which the log warns
(our choice: a map whose every hundredth cell extrapolates needs a word)."""
MODEL_ADVICE = ("Refit with 'Fit covariance model' and another Covariance family (KERNEL: exponential or "
                "spherical instead of gaussian), or give the model file a positive nugget; with local kriging, "
                "NEIGHBOURS = 0 (every sample) or a different number of neighbours changes the weights.")
AREA_ADVICE = ("Limit the map to the samples with MAP_AREA = hull (and HULL_MARGIN), a MASK or a smaller EXTENT; "
               "read the variance beside the prediction there.")
POINT_ADVICE = "Read the variance and standard error beside the estimate at those points."
PLACE_WORDS = {"cell": ("mapped cells", "cell(s) are nodata", "per cell", AREA_ADVICE),
               "point": ("target points", "target point(s) get no value (NULL)", "per point", POINT_ADVICE)}
"""What :meth:`ExtrapolationCheck.lines` calls the places checked: the places, those left without a value, the
probability's unit and the advice when many extrapolate."""


@dataclass
class FieldCounts:
    """Counts of one field: cells set to nodata outside the model, cells below / above the data range."""

    outside_model: int = 0
    below: int = 0
    above: int = 0
    lowest: float = np.inf
    highest: float = -np.inf


@dataclass
class ExtrapolationCheck:
    """The samples and the model a grid is kriged from, and what the checks counted so far.

    Build it with :meth:`for_samples`; :func:`.grid_surfaces.write_surfaces` calls :meth:`screen`,
    :meth:`count_data_range` and :meth:`distances` per block; :meth:`lines` gives the log lines.

    Attributes
    ----------
    tree : cKDTree
        Of the sample coordinates (working CRS units).
    frames : list of (Structure, cKDTree)
        Each structure with the samples in its anisotropy frame (:func:`..model.covariance.search_frame`).
    mean : MeanModel
        The model's mean.
    coefficients : ndarray of shape (p, k)
        Least-squares trend coefficients, one column per field.
    sds : ndarray of shape (k,)
        Square root of each field's total sill (modelling scale).
    data_range : ndarray of shape (k, 2)
        Smallest and largest sample value of each field (attribute units).
    fields : list of str
        Field names, for the log.
    cells, beyond_range : int
        Cells checked so far, and those farther than the effective range from every sample.
    counts : list of FieldCounts
    covariate_range : ndarray of shape (c, 2)
        Smallest and largest value of each covariate column at the samples ((0, 2) without covariates).
    beyond_covariates : int
        Cells checked so far where a covariate column lies outside its range at the samples.
    """

    tree: cKDTree
    frames: list
    mean: MeanModel
    coefficients: np.ndarray
    sds: np.ndarray
    data_range: np.ndarray
    fields: list[str]
    cells: int = 0
    beyond_range: int = 0
    counts: list[FieldCounts] = field(default_factory=list)
    covariate_range: np.ndarray = field(default_factory=lambda: np.zeros((0, 2)))
    beyond_covariates: int = 0

    @classmethod
    def for_samples(cls, xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel,
                    transform: Transform, fields: Sequence[str], sill_factors: Sequence[float] | None = None,
                    covariates: np.ndarray | None = None) -> ExtrapolationCheck:
        """The check of a run kriging ``values`` (modelling scale, (n,) or (n, k)) at ``xy`` (n, 2).

        ``sill_factors`` scales the covariance's sill per field (a model shared by several fields at
        their own scales); 1 for each field when None. ``covariates`` are the mean's covariate columns at the
        samples, when it names any.
        """
        columns = np.asarray(values, dtype=float).reshape(len(xy), -1)
        design = mean.design(xy, covariates)
        residual = columns - mean.known_mean(1)[0]
        coefficients = (np.linalg.lstsq(design, residual, rcond=None)[0] if design.shape[1]
                        else np.zeros((0, columns.shape[1])))
        factors = np.ones(columns.shape[1]) if sill_factors is None else np.asarray(sill_factors, dtype=float)
        original = transform.back_median(columns)
        frames = [(structure, cKDTree(search_frame(structure, xy))) for structure in covariance.structures]
        ranges = np.zeros((0, 2)) if covariates is None else covariate_range(covariates)
        return cls(cKDTree(xy), frames, mean, coefficients, np.sqrt(covariance.sill * factors),
                   np.column_stack([original.min(axis=0), original.max(axis=0)]), list(fields),
                   counts=[FieldCounts() for _ in fields], covariate_range=ranges)

    def emptied(self) -> ExtrapolationCheck:
        """The same samples and model with nothing counted yet (the check of one block of a run kriged in
        separate tasks; :meth:`absorb` adds its counts to the run's)."""
        return replace(self, cells=0, beyond_range=0, counts=[FieldCounts() for _ in self.fields],
                       beyond_covariates=0)

    def absorb(self, part: ExtrapolationCheck) -> None:
        """Add the counts of ``part`` (an :meth:`emptied` copy that checked other cells) to these."""
        self.cells += part.cells
        self.beyond_range += part.beyond_range
        self.beyond_covariates += part.beyond_covariates
        for mine, theirs in zip(self.counts, part.counts):
            mine.outside_model += theirs.outside_model
            mine.below += theirs.below
            mine.above += theirs.above
            mine.lowest = min(mine.lowest, theirs.lowest)
            mine.highest = max(mine.highest, theirs.highest)

    def trend(self, centres: np.ndarray, covariates0: np.ndarray | None = None) -> np.ndarray:
        """The least-squares trend at ``centres`` (m, 2) with their covariate columns, one column per field
        (modelling scale)."""
        return self.mean.known_mean(1)[0] + self.mean.design(centres, covariates0) @ self.coefficients

    def screen(self, centres: np.ndarray, mean: np.ndarray, variance: np.ndarray,
               covariates0: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """``mean`` (m, k) and ``variance`` (m, k) with NaN where a field's mean lies more than
        :data:`TAIL_SDS` standard deviations from its trend; those cells are counted, and every cell
        is counted beyond the effective range or not, and outside the covariates' range at the samples or not."""
        self.cells += len(centres)
        if covariates0 is not None and len(self.covariate_range):
            self.beyond_covariates += beyond_covariate_range(self.covariate_range, covariates0)
        beyond = np.ones(len(centres), bool)
        for structure, tree in self.frames:
            nearest, _ = tree.query(search_frame(structure, centres))
            beyond &= nearest > structure.effective_range
        self.beyond_range += int(np.count_nonzero(beyond))
        outside = np.abs(mean - self.trend(centres, covariates0)) > TAIL_SDS * self.sds
        for counts, column in zip(self.counts, outside.T):
            counts.outside_model += int(np.count_nonzero(column))
        return np.where(outside, np.nan, mean), np.where(outside, np.nan, variance)

    def count_data_range(self, column: int, prediction: np.ndarray) -> None:
        """Count the cells whose ``prediction`` (attribute units) lies outside field ``column``'s data range."""
        counts, (low, high) = self.counts[column], self.data_range[column]
        finite = prediction[np.isfinite(prediction)]
        counts.below += int(np.count_nonzero(finite < low))
        counts.above += int(np.count_nonzero(finite > high))
        if len(finite):
            counts.lowest = min(counts.lowest, float(finite.min()))
            counts.highest = max(counts.highest, float(finite.max()))

    def distances(self, centres: np.ndarray) -> np.ndarray:
        """Euclidean distance from each of ``centres`` (m, 2) to its nearest sample (working CRS units)."""
        return self.tree.query(centres)[0]

    def lines(self, units: str = "metre", places: str = "cell") -> list[LogLine]:
        """The log lines of the counts: warnings for cells outside the model and above
        :data:`EXTRAPOLATION_SHARE` of the cells extrapolated, information otherwise.

        ``places`` is ``"cell"`` (a grid) or ``"point"`` (target points), for the words of :data:`PLACE_WORDS`.
        """
        if not self.cells:
            return []
        checked, missing, each, advice = PLACE_WORDS[places]
        reach = max(structure.effective_range for structure, _ in self.frames)
        share = self.beyond_range / self.cells
        lines = [LogLine("warning" if share > EXTRAPOLATION_SHARE else "info",
                         f"{self.beyond_range:,} of {self.cells:,} {checked} ({share:.1%}) lie farther than the "
                         f"model's effective range ({reach:.4g} {units} along the major axis) from every sample: "
                         "there the prediction is the model's mean and the variance near the sill."
                         + (" " + advice if share > EXTRAPOLATION_SHARE else ""))]
        if self.beyond_covariates:
            lines.append(covariate_range_line(self.beyond_covariates, self.cells, checked))
        for name, counts, sd, (low, high) in zip(self.fields, self.counts, self.sds, self.data_range):
            if counts.outside_model:
                lines.append(LogLine("warning", f"{name}: {counts.outside_model:,} {missing}: their kriging "
                                     f"prediction lies more than {TAIL_SDS:g} standard deviations of the model "
                                     f"(square root of the sill, {sd:.4g} in the modelling scale) from the model's "
                                     f"mean, which a Gaussian field reaches with probability about 2e-9 {each}; "
                                     "the kriging weights are unstable there. " + MODEL_ADVICE))
            outside = counts.below + counts.above
            share = outside / self.cells
            span = (f"; the predictions span {counts.lowest:.4g} to {counts.highest:.4g}."
                    if counts.lowest <= counts.highest else ".")
            words = (f"{name}: {outside:,} {checked} ({share:.1%}) are predicted outside the range of the "
                     f"samples ({low:.4g} to {high:.4g}): {counts.below:,} below, {counts.above:,} above{span}")
            if share > EXTRAPOLATION_SHARE:
                lines.append(LogLine("warning", words + " Kriging beyond the data follows the model's mean and "
                                     "trend, not measurements. " + advice))
            else:
                lines.append(LogLine("info", words))
        return lines


def covariate_range(columns: np.ndarray) -> np.ndarray:
    """Smallest and largest value of each covariate column ``(n, c)`` at the samples: ``(c, 2)``."""
    columns = np.asarray(columns, dtype=float)
    return np.column_stack([np.min(columns, axis=0), np.max(columns, axis=0)])


def beyond_covariate_range(ranges: np.ndarray, columns: np.ndarray) -> int:
    """How many rows of ``columns`` ``(m, c)`` have a column outside its range ``ranges`` ``(c, 2)`` (NaN rows are
    not counted)."""
    low, high = np.asarray(ranges, dtype=float).T
    return int(np.count_nonzero(np.any((columns < low) | (columns > high), axis=1)))


def covariate_range_line(beyond: int, places: int, checked: str) -> LogLine:
    """The warning that ``beyond`` of ``places`` (called ``checked``, e.g. "mapped cells") extrapolate the trend."""
    return LogLine("warning", f"{beyond:,} of {places:,} {checked} ({beyond / places:.1%}) have a covariate value "
                   "outside the range seen at the samples: there the covariate trend is extrapolated, beyond what "
                   "the samples support. Read those places with care, or add samples there.")


def covariate_extrapolation(sample_columns: np.ndarray, columns: np.ndarray, places: str = "cell") -> list[LogLine]:
    """The log of places whose covariate columns ``(m, c)`` leave their range at the samples ``(n, c)``: one
    warning, or none when no place does. ``places`` as for :meth:`ExtrapolationCheck.lines`."""
    beyond = beyond_covariate_range(covariate_range(sample_columns), columns)
    return [covariate_range_line(beyond, len(columns), PLACE_WORDS[places][0])] if beyond else []
