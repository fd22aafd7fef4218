"""Covariate rasters (external drift): read at sample points, resampled onto an output grid, made design columns.

A continuous covariate enters the mean as one column, its raster value; a class covariate (soil type,
flood-frequency class) as one 0/1 indicator per class seen at the samples except the *baseline*, the most
frequent class among the samples (ties: the smallest class value). This is kriging with external drift /
universal kriging with covariates (Wackernagel 2003, ch. 38; Hengl, Heuvelink & Rossiter 2007).

At points the rasters are read in their own CRS (the points transformed from the working CRS with pyproj):
bilinear interpolation between the four nearest cell centres for continuous covariates (nodata when one of
them with a weight above zero is nodata), the cell that holds the point for classes. On an output grid they
are warped by GDAL, one block of rows at a time (bounded memory): bilinear, or the average of the raster's
cells where the raster is finer than the output cell, and nearest for classes. A location outside a raster
or on a nodata cell has no covariate value (NaN), as has a location whose class no sample has (its
coefficient cannot be estimated).
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from osgeo import gdal

from ..errors import FieldcastError, FieldcastUsageError
from ..model.mean import MeanModel
from .crs import defined_crs, same_crs, to_wkt2, transform_points
from .grid import GridSpec
from .template import open_raster

COVARIATE_KINDS = ("continuous", "class")
"""Kinds of covariate: a measured quantity, or a raster of class codes."""
STRIP_CELLS = 4_000_000
"""Most cells of a covariate raster read at a time when it is sampled at points (whole strips of rows)."""
CONSTANT_TOLERANCE = 1e-9
"""Relative spread at the samples below which a covariate counts as constant (rounding of the bilinear weights)."""
RANK_TOLERANCE = 1e-8
"""Relative singular value below which a design column counts as a combination of the others."""


@dataclass(frozen=True)
class CovariateSource:
    """A covariate raster as the user chose it.

    Attributes
    ----------
    name : str
        Its name in the model (the layer name).
    path : str
        What GDAL opens.
    kind : str
        One of :data:`COVARIATE_KINDS`.
    crs_wkt : str
        Its CRS as the caller knows it; empty = the CRS stored in the file.
    """

    name: str
    path: str
    kind: str = "continuous"
    crs_wkt: str = ""

    def __post_init__(self) -> None:
        if self.kind not in COVARIATE_KINDS:
            raise FieldcastUsageError(f"Unknown covariate kind {self.kind!r}; one of {COVARIATE_KINDS}.")

    def open(self) -> tuple[gdal.Dataset, str]:
        """The GDAL dataset and its CRS (WKT2); FieldcastError when it cannot be opened or has no defined CRS (none,
        or a placeholder that does not say whether its coordinates are degrees or metres)."""
        dataset = open_raster(self.path, f"covariate {self.name!r}", "in COVARIATES or CLASS_COVARIATES")
        crs = defined_crs(self.crs_wkt or dataset.GetProjection(), f"{self.name} (a covariate raster)")
        return dataset, to_wkt2(crs)


@dataclass(frozen=True)
class Covariate:
    """One covariate of a fitted mean model.

    Attributes
    ----------
    name : str
        Its name (the layer name it was fitted with).
    kind : str
        One of :data:`COVARIATE_KINDS`.
    classes : tuple of float
        For a class covariate the classes seen at the samples, ascending; empty for a continuous one.
    baseline : float or None
        For a class covariate the class without an indicator (the most frequent at the samples).
    source : str
        The raster it was fitted with (for information only).
    """

    name: str
    kind: str = "continuous"
    classes: tuple[float, ...] = ()
    baseline: float | None = None
    source: str = ""

    @property
    def columns(self) -> tuple[str, ...]:
        """Its design-column names: the name, or ``name=class`` for each class but the baseline."""
        if self.kind == "continuous":
            return (self.name,)
        return tuple(f"{self.name}={c:g}" for c in self.classes if c != self.baseline)

    def design(self, raw: np.ndarray) -> np.ndarray:
        """Design columns ``(n, len(columns))`` from raw raster values; NaN rows where there is no value
        or the class was not seen at the samples."""
        raw = np.asarray(raw, dtype=float)
        if self.kind == "continuous":
            return raw[:, None].copy()
        known = np.isin(raw, self.classes)
        columns = np.column_stack([(raw == c).astype(float) for c in self.classes if c != self.baseline])
        columns[~known] = np.nan
        return columns

    def to_dict(self) -> dict:
        """Plain data for the model file."""
        data = {"name": self.name, "kind": self.kind, "source": self.source}
        if self.kind == "class":
            data.update(classes=[float(c) for c in self.classes], baseline=float(self.baseline))
        return data

    @classmethod
    def from_dict(cls, data: dict) -> Covariate:
        """Inverse of :meth:`to_dict`."""
        baseline = data.get("baseline")
        return cls(str(data["name"]), str(data.get("kind", "continuous")),
                   tuple(float(c) for c in data.get("classes", ())),
                   None if baseline is None else float(baseline), str(data.get("source", "")))


@dataclass(frozen=True)
class CovariateSet:
    """The covariates of a mean model, in design order."""

    covariates: tuple[Covariate, ...] = ()

    @property
    def names(self) -> tuple[str, ...]:
        """The covariate names, in order."""
        return tuple(c.name for c in self.covariates)

    @property
    def column_names(self) -> tuple[str, ...]:
        """Names of all design columns, in order (the mean model's ``covariate_names``)."""
        return tuple(name for c in self.covariates for name in c.columns)

    def design(self, raw: np.ndarray) -> np.ndarray:
        """Design columns ``(n, len(column_names))`` from raw values ``(n, len(covariates))``; NaN rows where a
        location has no usable value (see :meth:`Covariate.design`)."""
        raw = np.asarray(raw, dtype=float).reshape(-1, len(self.covariates))
        if not self.covariates:
            return np.zeros((len(raw), 0))
        return np.column_stack([c.design(raw[:, k]) for k, c in enumerate(self.covariates)])

    @classmethod
    def from_samples(cls, sources: Sequence[CovariateSource], raw: np.ndarray) -> CovariateSet:
        """The covariates described by their values at the samples (rows with a NaN already left out).

        Raises
        ------
        FieldcastError
            If a covariate has the same value (or class) at every sample: its column would repeat the
            constant of the trend; or if a class covariate holds a value that is not a whole number (a
            raster of measured values given as classes, which would make one class per sample).
        """
        raw = np.asarray(raw, dtype=float).reshape(-1, len(sources))
        covariates = []
        for k, source in enumerate(sources):
            column = raw[:, k]
            if len(column) == 0 or np.ptp(column) <= CONSTANT_TOLERANCE * np.max(np.abs(column)):
                value = f" ({column[0]:g})" if len(column) else ""
                raise FieldcastError(
                    f"Covariate {source.name!r} has the same value{value} at every sample, so it cannot explain "
                    "any difference between them. Remove it from COVARIATES or CLASS_COVARIATES, or choose a "
                    "raster that varies across the samples.")
            if source.kind == "continuous":
                covariates.append(Covariate(source.name, "continuous", source=source.path))
                continue
            if not np.all(column == np.round(column)):
                fraction = column[column != np.round(column)][0]
                raise FieldcastError(
                    f"Class covariate {source.name!r} holds {fraction:g} at a sample, not a whole-number class code: "
                    "it looks like a raster of measured values. Give it in COVARIATES (continuous) instead of "
                    "CLASS_COVARIATES, or turn it into class codes first (Processing Toolbox > Raster analysis > "
                    "Reclassify by table).")
            classes, counts = np.unique(column, return_counts=True)
            baseline = float(classes[np.argmax(counts)])
            covariates.append(Covariate(source.name, "class", tuple(float(c) for c in classes), baseline,
                                        source.path))
        return cls(tuple(covariates))

    def require(self, sources: Sequence[CovariateSource]) -> None:
        """Refuse covariates given to a later step unless they are the model's, by name and order.

        Raises
        ------
        FieldcastError
            Saying which covariates are missing, extra, of another kind, or in another order.
        """
        given = [(s.name, s.kind) for s in sources]
        wanted = [(c.name, c.kind) for c in self.covariates]
        if given == wanted:
            return
        names = [name for name, _ in given]
        missing = [c.name for c in self.covariates if c.name not in names]
        extra = [name for name in names if name not in self.names]
        problems = []
        if missing:
            problems.append(f"missing {', '.join(map(repr, missing))}")
        if extra:
            problems.append(f"extra {', '.join(map(repr, extra))}")
        if not problems:
            problems.append("given as another kind or in another order")
        if not wanted:
            raise FieldcastError(f"The model was fitted without covariates, but covariates are given ({problems[0]}). "
                                 "Leave COVARIATES and CLASS_COVARIATES empty, or refit the model with these "
                                 "covariates.")
        wanted_words = ", ".join(f"{name!r} ({'CLASS_COVARIATES' if kind == 'class' else 'COVARIATES'})"
                                 for name, kind in wanted)
        raise FieldcastError(f"The model was fitted with the covariates {wanted_words}; here they are "
                             f"{'; '.join(problems)}. Give the same raster layers (by layer name, in the same "
                             "order), or refit the model with these covariates.")

    def to_list(self) -> list[dict]:
        """Plain data for the model file."""
        return [c.to_dict() for c in self.covariates]

    @classmethod
    def from_list(cls, data: Sequence[dict]) -> CovariateSet:
        """Inverse of :meth:`to_list`."""
        return cls(tuple(Covariate.from_dict(item) for item in data))

    def at_points(self, sources: Sequence[CovariateSource], xy: np.ndarray, working_wkt: str) -> np.ndarray:
        """Design columns at points (working CRS) from the rasters given to a later step, after :meth:`require`;
        NaN rows where a location has no usable value."""
        self.require(sources)
        return self.design(sample_at_points(sources, xy, working_wkt))

    def at_rows(self, sources: Sequence[CovariateSource], grid: GridSpec, row_start: int, row_stop: int,
                working_wkt: str) -> np.ndarray:
        """Design columns at the cells of rows ``row_start:row_stop`` of ``grid`` (see :func:`resample_rows`);
        NaN rows where a cell has no usable value. Call :meth:`require` first."""
        return self.design(resample_rows(sources, grid, row_start, row_stop, working_wkt))


@dataclass(frozen=True)
class SampleCovariates:
    """The covariates of a fit, read at the samples.

    Attributes
    ----------
    covariates : CovariateSet
        What the rasters hold at the samples (classes, baselines).
    columns : ndarray of shape (n_kept, k)
        Design columns at the samples kept.
    kept : ndarray of bool, shape (n,)
        Samples where every covariate has a value.
    """

    covariates: CovariateSet
    columns: np.ndarray
    kept: np.ndarray

    @property
    def skipped(self) -> int:
        """Samples left out because a covariate has no value there."""
        return int(np.count_nonzero(~self.kept))

    @classmethod
    def read(cls, sources: Sequence[CovariateSource], xy: np.ndarray, working_wkt: str) -> SampleCovariates:
        """Read the rasters at the samples (working CRS) and describe the covariates from the samples with values.

        Raises
        ------
        FieldcastError
            If no sample has a value in every covariate, or a covariate does not vary at the samples.
        """
        raw = sample_at_points(sources, xy, working_wkt)
        kept = np.all(np.isfinite(raw), axis=1)
        if not kept.any():
            raise FieldcastError("No sample lies on a cell with a value in every covariate raster. Check that the "
                                 "rasters cover the samples (and their CRS), or remove covariates that do not.")
        covariates = CovariateSet.from_samples(sources, raw[kept])
        return cls(covariates, covariates.design(raw[kept]), kept)


def check_design(design: np.ndarray, names: Sequence[str]) -> None:
    """Refuse a design (trend terms and covariate columns at the samples) whose columns are linearly dependent.

    Columns are scaled to unit length and added one at a time; the first that adds no rank (relative singular
    value below :data:`RANK_TOLERANCE`) is named.

    Raises
    ------
    FieldcastError
        Naming the column that repeats a combination of the ones before it, with advice.
    """
    design = np.asarray(design, dtype=float)
    norms = np.linalg.norm(design, axis=0)
    scaled = design / np.where(norms > 0, norms, 1.0)
    for k in range(1, design.shape[1] + 1):
        singular = np.linalg.svd(scaled[:, :k], compute_uv=False)
        if singular[-1] <= RANK_TOLERANCE * singular[0]:
            raise FieldcastError(
                f"At the samples the mean column {names[k - 1]!r} is a combination of the columns before it "
                f"({', '.join(map(repr, names[:k - 1]))}): covariates that repeat each other or the trend are "
                "collinear, and their coefficients cannot be estimated. Remove one of them from COVARIATES or "
                "CLASS_COVARIATES, merge classes that always occur together, or choose a simpler TREND.")


def sample_at_points(sources: Sequence[CovariateSource], xy: np.ndarray, working_wkt: str) -> np.ndarray:
    """Raw covariate values at points: ``(n, len(sources))``, NaN where a raster has no value.

    Parameters
    ----------
    sources : sequence of CovariateSource
        The rasters (band 1 of each is read).
    xy : ndarray of shape (n, 2)
        Points in the working CRS.
    working_wkt : str
        The working CRS.
    """
    xy = np.asarray(xy, dtype=float)
    raw = np.full((len(xy), len(sources)), np.nan)
    for k, source in enumerate(sources):
        dataset, wkt = source.open()
        points = xy if same_crs(wkt, working_wkt) else transform_points(xy, working_wkt, wkt)
        raw[:, k] = _read_points(dataset, points, source.kind == "continuous", source.name)
    return raw


def _read_points(dataset: gdal.Dataset, points: np.ndarray, bilinear: bool, name: str) -> np.ndarray:
    """Band 1 at ``points`` (the raster's CRS), bilinear or the cell holding each point, in strips of rows."""
    x0, dx, rx, y0, ry, dy = dataset.GetGeoTransform()
    if rx or ry:
        raise FieldcastError(f"The covariate raster {name!r} is rotated; warp it to a north-up grid first (Raster "
                             "> Projections > Warp (reproject)).")
    n_cols, n_rows = dataset.RasterXSize, dataset.RasterYSize
    col = (points[:, 0] - x0) / dx
    row = (points[:, 1] - y0) / dy
    inside = (col >= 0) & (col <= n_cols) & (row >= 0) & (row <= n_rows)
    if bilinear:  # cell-centre coordinates, clamped to the outer centres at the raster's edge
        col = np.clip(col - 0.5, 0, n_cols - 1)
        row = np.clip(row - 0.5, 0, n_rows - 1)
        first_col = np.minimum(np.floor(col).astype(int), max(n_cols - 2, 0))
        first_row = np.minimum(np.floor(row).astype(int), max(n_rows - 2, 0))
        span = 2
    else:
        first_col = np.minimum(np.floor(col).astype(int), n_cols - 1)
        first_row = np.minimum(np.floor(row).astype(int), n_rows - 1)
        span = 1
    values = np.full(len(points), np.nan)
    band = dataset.GetRasterBand(1)
    step = max(1, STRIP_CELLS // n_cols)
    for start in range(0, n_rows, step):
        chosen = np.flatnonzero(inside & (first_row >= start) & (first_row < start + step))
        if len(chosen) == 0:
            continue
        stop = min(n_rows, start + step + span - 1)
        data = band.ReadAsArray(0, start, n_cols, stop - start)
        mask = band.GetMaskBand().ReadAsArray(0, start, n_cols, stop - start)
        if data is None or mask is None:
            raise FieldcastError(f"GDAL could not read the covariate raster {name!r}: {gdal.GetLastErrorMsg()}. "
                                 "Check the file.")
        data = data.astype(float)
        data[mask == 0] = np.nan
        r, c = first_row[chosen] - start, first_col[chosen]
        if not bilinear:
            values[chosen] = data[r, c]
            continue
        r1, c1 = np.minimum(r + 1, stop - start - 1), np.minimum(c + 1, n_cols - 1)
        fr, fc = row[chosen] - first_row[chosen], col[chosen] - first_col[chosen]
        corners = [((1 - fr) * (1 - fc), data[r, c]), ((1 - fr) * fc, data[r, c1]),
                   (fr * (1 - fc), data[r1, c]), (fr * fc, data[r1, c1])]
        values[chosen] = sum(np.where(weight > 0, weight * value, 0.0) for weight, value in corners)
        missing = np.any([(weight > 0) & np.isnan(value) for weight, value in corners], axis=0)
        values[chosen[missing]] = np.nan
    return values


def resample_rows(sources: Sequence[CovariateSource], grid: GridSpec, row_start: int, row_stop: int,
                  working_wkt: str) -> np.ndarray:
    """Raw covariate values at the cells of rows ``row_start:row_stop`` of ``grid``, row by row from the top.

    Each raster is warped by GDAL onto that block of the grid (in the working CRS) in memory: classes by
    nearest cell, continuous values bilinear, or by the average of the raster's cells where they are smaller
    than the output cell.

    Returns
    -------
    ndarray of shape ((row_stop - row_start) * grid.n_cols, len(sources))
        NaN where a raster has no value.
    """
    rows = row_stop - row_start
    x_min, y_max = grid.x_min, grid.y_max - row_start * grid.pixel_size
    bounds = (x_min, y_max - rows * grid.pixel_size, x_min + grid.n_cols * grid.pixel_size, y_max)
    raw = np.full((rows * grid.n_cols, len(sources)), np.nan)
    for k, source in enumerate(sources):
        dataset, wkt = source.open()
        if source.kind == "class":
            method = "near"
        else:
            method = "average" if _cell_size_in(dataset, wkt, working_wkt) < grid.pixel_size else "bilinear"
        warped = gdal.Warp("", dataset, format="MEM", outputBounds=bounds, width=grid.n_cols, height=rows,
                           srcSRS=wkt, dstSRS=working_wkt, resampleAlg=method, outputType=gdal.GDT_Float64,
                           dstNodata=float("nan"), multithread=False)
        if warped is None:
            raise FieldcastError(f"GDAL could not resample the covariate raster {source.name!r}: "
                                 f"{gdal.GetLastErrorMsg()}. Check the file.")
        values = warped.GetRasterBand(1).ReadAsArray().astype(float)
        raw[:, k] = values.reshape(-1)
    return raw


def _cell_size_in(dataset: gdal.Dataset, wkt: str, working_wkt: str) -> float:
    """The raster's cell width near its centre, measured in the working CRS's units."""
    x0, dx, _, y0, _, dy = dataset.GetGeoTransform()
    cx, cy = x0 + dx * dataset.RasterXSize / 2, y0 + dy * dataset.RasterYSize / 2
    corners = np.array([[cx, cy], [cx + dx, cy + dy]])
    if not same_crs(wkt, working_wkt):
        corners = transform_points(corners, wkt, working_wkt)
    return float(np.hypot(*(corners[1] - corners[0])) / math.sqrt(2.0))



def covariate_mean(kind: str, xy: np.ndarray, column_names: Sequence[str], columns: np.ndarray) -> MeanModel:
    """The mean model of a fit with covariates: trend ``kind`` in the samples' frame plus the design columns
    ``column_names`` (their values ``columns`` at the samples ``xy``), refused by :func:`check_design` when
    collinear with the trend."""
    mean = MeanModel.for_data(kind, xy, tuple(column_names))
    check_design(mean.design(xy, columns), mean.term_names)
    return mean


@dataclass(frozen=True)
class CellCovariates:
    """Covariate columns at every cell of a grid and the cells they leave usable.

    Attributes
    ----------
    columns : ndarray of shape (n_rows * n_cols, c)
        Design columns in raster order; zeros where a covariate has no value (those cells are outside
        ``inside``, so the zeros only keep arrays finite).
    inside : ndarray of bool, shape (n_rows, n_cols)
        The given cell mask without the cells where a covariate has no value.
    missing : int
        Cells of the given mask dropped for a missing covariate value.
    """

    columns: np.ndarray
    inside: np.ndarray
    missing: int

    @classmethod
    def of(cls, columns: np.ndarray, grid: GridSpec, inside: np.ndarray | None) -> CellCovariates:
        """From the columns at every cell (raster order, NaN rows where there is no value) and the cell mask.

        Raises
        ------
        FieldcastError
            When no cell of the mask has a value in every covariate.
        """
        usable = np.all(np.isfinite(columns), axis=1).reshape(grid.n_rows, grid.n_cols)
        limited = usable if inside is None else inside & usable
        if not limited.any():
            raise FieldcastError("No cell of the grid has a value in every covariate raster (or a class the samples "
                                 "have). Choose covariate rasters that cover the grid, or another EXTENT or "
                                 "TEMPLATE.")
        missing = int(np.count_nonzero(~usable if inside is None else inside & ~usable))
        return cls(np.where(usable.reshape(-1, 1), columns, 0.0), limited, missing)
