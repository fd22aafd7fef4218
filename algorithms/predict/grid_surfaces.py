"""Kriging a grid in row blocks and writing the prediction, variance, standard error, interval and exceedance GeoTIFFs.

Blocks are whole rows of 256 x 256 GeoTIFF tiles; memory stays bounded by one
block of rows at a time, whatever the raster's height; the files appear only
when every block is written (see :class:`..io.geotiff.GeoTiffWriter`).
Each cell is predicted at its centre (point support) or as the average over the
cell (cell support, block kriging: :func:`.block.block_predict`).
:func:`predict_points` is the step per block that the point outputs share: kriging at any
points, the extrapolation screen, and the output quantities in attribute units.
"""
from __future__ import annotations

import contextlib
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy import stats

from ..errors import Cancelled, FieldcastError
from ..io.geotiff import GeoTiffWriter
from ..io.grid import GridSpec
from ..io.nodata_counts import NodataCounts, unwritable
from ..io.staging import staged_together
from ..model.transform import Transform
from .block import DEFAULT_POINTS_PER_SIDE, arithmetic_block_predict, block_predict
from .exceedance import exceedance_probability
from .extrapolation import ExtrapolationCheck
from .kriging import KrigingPredictor
from .local import LocalKrigingPredictor

BACKTRANSFORMS = ("median", "mean")
SUPPORTS = ("point", "cell", "cell_log")
"""Point (cell centre), cell (the cell's arithmetic average in attribute units; for a log model the exact
lognormal mean of the average, :func:`.block.arithmetic_block_predict`) and cell_log (a log model's average
taken in the log scale, :func:`.block.block_predict`; the same as cell without a transform)."""
SURFACE_KINDS = ("prediction", "variance", "sd", "lower", "upper", "exceedance")
"""The rasters :func:`write_surfaces` can write, in band-description order."""
BLOCK_CELLS = 1 << 20
"""Most cells predicted per block of rows (about 50 MB of working arrays with a few hundred samples)."""
TILE_ROWS = 256
DISTANCE_DESCRIPTION = "distance from the cell centre to the nearest sample (working CRS units, straight line)"

CellPredictor = Callable[..., tuple[np.ndarray, np.ndarray]]
"""``predict(centres (m, 2), progress, should_stop[, covariates0 (m, c)]) -> (mean, variance)`` in the modelling
scale; ``mean`` has one column per field when the predictor krigs several fields at once. ``covariates0`` (the
mean's covariate columns at the centres) is passed only when the mean names covariates."""


def cell_predictor(predictor: KrigingPredictor | LocalKrigingPredictor, support: str = "point",
                   pixel_size: float = 0.0, transform: Transform | None = None) -> CellPredictor:
    """Kriging at cell centres or other points (``support == "point"``) or of cell averages of side
    ``pixel_size`` (``"cell"`` and ``"cell_log"``, block kriging; global :class:`KrigingPredictor` only; a cell's
    covariate columns stand for their average over the cell). ``"cell"`` with a log ``transform`` gives the log-scale
    equivalents of the arithmetic average (:func:`.block.arithmetic_block_predict`)."""
    if support == "cell" and transform is not None and transform.kind == "log":
        def predict(centres, progress, should_stop, covariates0=None):
            return arithmetic_block_predict(predictor, centres, pixel_size, covariates0, progress=progress,
                                            should_stop=should_stop)
    elif support in ("cell", "cell_log"):
        def predict(centres, progress, should_stop, covariates0=None):
            return block_predict(predictor, centres, pixel_size, covariates0, progress=progress,
                                 should_stop=should_stop)
    else:
        def predict(centres, progress, should_stop, covariates0=None):
            return predictor.predict(centres, covariates0, progress=progress, should_stop=should_stop)
    return predict


def check_interval(probability: float) -> None:
    """Refuse a central-interval probability that is not strictly between 0 and 1.

    Raises
    ------
    FieldcastError
        Naming the value and INTERVAL_PROBABILITY.
    """
    if not 0.0 < probability < 1.0:
        raise FieldcastError(f"The interval probability (INTERVAL_PROBABILITY) must lie strictly between 0 and 1, "
                             f"got {probability:g}; 0.9 gives the 5 % and 95 % quantiles.")


@dataclass(frozen=True)
class SurfaceScale:
    """How modelling-scale kriging results become output numbers.

    Attributes
    ----------
    transform : Transform
        Transform of the model.
    backtransform : str
        ``"median"`` (``exp(mu) - offset``) or ``"mean"`` (``exp(mu + s2/2) - offset``) for a log model.
    support : str
        ``"point"`` (value at the cell centre) or ``"cell"`` (average over the cell).
    threshold : float or None
        Threshold of the exceedance probability, attribute units.
    interval : float
        Probability of the central predictive interval whose ends the ``"lower"`` and ``"upper"``
        rasters hold: the quantiles at ``(1 - interval) / 2`` and ``(1 + interval) / 2``
        (0.9 gives the 5 % and 95 % quantiles).

    Raises
    ------
    FieldcastError
        If ``interval`` is not strictly between 0 and 1.
    """

    transform: Transform
    backtransform: str = "median"
    support: str = "point"
    threshold: float | None = None
    interval: float = 0.9

    def __post_init__(self) -> None:
        check_interval(self.interval)

    @property
    def interval_z(self) -> float:
        """Standard normal quantile of the upper interval end, ``z`` at ``(1 + interval) / 2``."""
        return float(stats.norm.ppf(0.5 + 0.5 * self.interval))

    def values(self, mean: np.ndarray, variance: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Prediction and variance in attribute units (squared for the variance)."""
        if self.backtransform == "mean":
            prediction = self.transform.back_mean(mean, variance)
        else:
            prediction = self.transform.back_median(mean)
        return prediction, self.transform.back_variance(mean, variance)

    def layers(self, mean: np.ndarray, variance: np.ndarray, kinds) -> dict[str, np.ndarray]:
        """The rasters named in ``kinds`` (of :data:`SURFACE_KINDS`) for modelling-scale ``mean`` and ``variance``."""
        prediction, back_variance = self.values(mean, variance)
        layers = {"prediction": prediction, "variance": back_variance}
        if "sd" in kinds:
            layers["sd"] = self.transform.back_sd(mean, variance)
        if "lower" in kinds:
            layers["lower"] = self.transform.back_quantile(mean, variance, -self.interval_z)
        if "upper" in kinds:
            layers["upper"] = self.transform.back_quantile(mean, variance, self.interval_z)
        if "exceedance" in kinds:
            layers["exceedance"] = exceedance_probability(mean, variance, self.threshold, transform=self.transform)
        return {kind: layers[kind] for kind in kinds}

    def quantile_words(self) -> tuple[str, str]:
        """The lower and upper interval ends as probabilities in words, e.g. ``("5 %", "95 %")``."""
        return f"{50 * (1 - self.interval):g} %", f"{50 * (1 + self.interval):g} %"

    def descriptions(self, field: str) -> dict[str, str]:
        """Band descriptions of the rasters of :data:`SURFACE_KINDS`."""
        points = f"{DEFAULT_POINTS_PER_SIDE} x {DEFAULT_POINTS_PER_SIDE} points"
        arithmetic = self.support == "cell" and self.transform.kind == "log"
        where = "at the cell centre" if self.support == "point" else f"average over the cell (block kriging, {points})"
        in_log = (f"arithmetic average over the cell in attribute units ({points}; exact lognormal mean and "
                  "variance, moment-matched lognormal for quantiles and exceedance)") if arithmetic else \
            f"{where} in the log scale"
        exceedance = (f"probability that {field} ({where}) exceeds {self.threshold:g} attribute units, under the "
                      "Gaussian model of the kriging mean and variance" if self.threshold is not None else "")
        low, high = self.quantile_words()
        if self.transform.kind == "none":
            quantile = (f"{{}} quantile of {field} (attribute units; mu {{}} z s, normal predictive distribution "
                        f"{where})")
            return {"prediction": f"prediction of {field} (attribute units; kriging prediction {where})",
                    "variance": f"variance of {field} (attribute units squared; kriging error variance {where}, "
                                "nugget excluded)",
                    "sd": f"standard error of {field} (attribute units; square root of the kriging error variance "
                          f"{where}, nugget excluded)",
                    "lower": quantile.format(low, "-"), "upper": quantile.format(high, "+"),
                    "exceedance": exceedance}
        offset = self.transform.offset
        formula = "exp(mu) - offset" if self.backtransform == "median" else "exp(mu + s2/2) - offset"
        quantile = (f"{{}} quantile of {field} (attribute units; lognormal predictive distribution: exp(mu {{}} z s) "
                    f"- offset, offset {offset:g}; {in_log})")
        return {"prediction": f"prediction of {field} (attribute units; log model back-transformed to the "
                              f"{self.backtransform}: {formula}, offset {offset:g}; {in_log})",
                "variance": f"variance of {field} (attribute units squared; lognormal: exp(2 mu + s2) (exp(s2) - 1), "
                            f"nugget excluded; {in_log})",
                "sd": f"standard error of {field} (attribute units; lognormal: exp(mu + s2/2) sqrt(exp(s2) - 1), "
                      f"nugget excluded; {in_log})",
                "lower": quantile.format(low, "-"), "upper": quantile.format(high, "+"),
                "exceedance": exceedance + (" (threshold log-transformed like the data)" if exceedance else "")}


@dataclass(frozen=True)
class PointValues:
    """What :func:`predict_points` found at ``m`` points for ``k`` fields.

    Attributes
    ----------
    layers : list of dict of str to ndarray
        Per field, each kind asked for (of :data:`SURFACE_KINDS`), shape (m,), attribute units.
        NaN where the point is unresolved or screened out.
    resolved : ndarray of bool, shape (m,)
        Points the predictor resolved (False: a local neighbourhood with too few samples in range, or singular).
    kept : ndarray of bool, shape (m, k)
        Resolved points whose mean lies within what the model allows (see :class:`.extrapolation.ExtrapolationCheck`).
    """

    layers: list[dict[str, np.ndarray]]
    resolved: np.ndarray
    kept: np.ndarray


def predict_points(predict: CellPredictor, xy: np.ndarray, scale: SurfaceScale, kinds: Sequence[str], *,
                   variance_factors: Sequence[float] = (1.0,), check: ExtrapolationCheck | None = None,
                   covariates: np.ndarray | None = None, progress: Callable[[float], None] | None = None,
                   should_stop: Callable[[], bool] | None = None) -> PointValues:
    """Krige ``xy`` and return the quantities ``kinds`` of every field in attribute units.

    Parameters
    ----------
    predict : CellPredictor
        ``predict(xy, progress, should_stop) -> (mean, variance)`` in the modelling scale
        (:func:`cell_predictor`); ``mean`` (m,) or (m, k) for k fields.
    xy : ndarray of shape (m, 2)
        Points, working CRS units.
    scale : SurfaceScale
        Transform, back-transform, threshold and interval of the outputs.
    kinds : sequence of str
        Quantities wanted, of :data:`SURFACE_KINDS` (``"exceedance"`` needs ``scale.threshold``).
    variance_factors : sequence of float
        Per field, its kriging variance over the predictor's (1 for a field kriged with its own model).
    check : ExtrapolationCheck, optional
        Screens means beyond what the model allows (set to NaN) and counts the points beyond the effective
        range and outside the data range.
    covariates : ndarray of shape (m, c), optional
        The mean's covariate columns at ``xy`` (finite), when it names covariates.
    progress, should_stop : callable, optional
        Passed to ``predict`` (fraction done; raises :class:`..errors.Cancelled` when ``should_stop()``).
    """
    extra = () if covariates is None else (covariates,)
    mean, variance = predict(xy, progress, should_stop, *extra)
    mean = mean.reshape(len(variance), -1)
    resolved = ~np.isnan(variance)
    variances = variance[:, None] * np.asarray(variance_factors, dtype=float)
    if check is not None:
        mean, variances = check.screen(xy, mean, variances, covariates)
    wanted = list(dict.fromkeys([*kinds, "prediction"]))
    layers = []
    for column in range(mean.shape[1]):
        values = scale.layers(mean[:, column], variances[:, column], wanted)
        if check is not None:
            check.count_data_range(column, values["prediction"])
        layers.append({kind: values[kind] for kind in kinds})
    return PointValues(layers, resolved, ~np.isnan(variances))


def block_rows(grid: GridSpec, fields: int = 1) -> int:
    """Rows per block: as many whole 256-row tile rows as fit in :data:`BLOCK_CELLS` cells per field, at least one.

    Blocks aligned to the GeoTIFF tiles are written as whole tiles, so GDAL never
    holds a partly written tile; memory grows with the raster's width only.
    """
    return TILE_ROWS * max(1, BLOCK_CELLS // (TILE_ROWS * grid.n_cols * fields))


@dataclass(frozen=True)
class FieldRasters:
    """Where one field's rasters go, for :func:`write_surfaces`.

    Attributes
    ----------
    field : str
        Attribute name, for the band descriptions.
    paths : Mapping[str, str]
        Destination file of each kind of :data:`SURFACE_KINDS` to write (kinds left out are not written).
    metadata : Mapping[str, object]
        GeoTIFF metadata of the field's files.
    variance_factor : float
        The field's kriging variance over the predictor's (its scale under a model shared by
        several fields; 1 for a field kriged with its own model).
    """

    field: str
    paths: Mapping[str, str]
    metadata: Mapping[str, object]
    variance_factor: float = 1.0


def write_surfaces(predict: CellPredictor, grid: GridSpec, inside: np.ndarray | None, scale: SurfaceScale,
                   crs_wkt: str, fields: Sequence[FieldRasters], progress: Callable[[float], None] | None = None,
                   should_stop: Callable[[], bool] | None = None, check: ExtrapolationCheck | None = None,
                   distance_path: str = "", covariates: Callable[[int, int], np.ndarray] | None = None,
                   ) -> NodataCounts:
    """Predict every cell (those with ``inside`` True) and write each field's GeoTIFFs; returns the nodata counts.

    ``predict`` gives one mean column per field of ``fields`` (shape (m,) for one field, (m, k) for k)
    and one variance, which each field scales by its ``variance_factor``. Cells outside the mask,
    cells the predictor leaves NaN (a local neighbourhood with too few samples in range) and values
    that do not fit Float32 are stored as nodata; :class:`..io.nodata_counts.NodataCounts` counts the last two.
    With a ``check``, a field's cells whose mean lies outside what the model allows are nodata too (and
    counted there, not in the counts returned), and the extrapolation counts are made; with a
    ``distance_path`` as well, the distance to the nearest sample is written there (GeoTIFF, nodata
    outside the mask). ``covariates(row_start, row_stop)``, when the mean names covariates, gives their design
    columns at the cells of those rows (raster order, NaN where a covariate has no usable value: such cells
    are nodata and counted in ``NodataCounts.no_covariate``).

    Every field's files appear together at the end (or, inside an :class:`..io.staging.OutputSet`, with
    the set's commit).

    Raises
    ------
    Cancelled
        When ``should_stop()`` turns True; no output file is left.
    FieldcastError
        When a raster would be nodata at every resolved cell (:meth:`..io.nodata_counts.NodataCounts.error`);
        no file is left.
    """
    if distance_path and check is None:
        raise FieldcastError("The distance raster needs the samples: pass an ExtrapolationCheck with distance_path.")
    step = block_rows(grid, len(fields))
    unresolved = kriged = no_covariate = 0
    lost = {f"{output.field} {kind}": 0 for output in fields for kind in SURFACE_KINDS if output.paths.get(kind)}
    with staged_together(), contextlib.ExitStack() as stack:
        distance_writer = (stack.enter_context(GeoTiffWriter(distance_path, grid, 1, crs_wkt, [DISTANCE_DESCRIPTION],
                                                             fields[0].metadata)) if distance_path else None)
        writers = []
        for output in fields:
            descriptions = scale.descriptions(output.field)
            kinds = [kind for kind in SURFACE_KINDS if output.paths.get(kind)]
            writers.append({kind: stack.enter_context(GeoTiffWriter(output.paths[kind], grid, 1, crs_wkt,
                                                                     [descriptions[kind]], output.metadata))
                            for kind in kinds})
        kinds_asked = [kind for kind in SURFACE_KINDS if any(kind in field_writers for field_writers in writers)]
        for start in range(0, grid.n_rows, step):
            if should_stop is not None and should_stop():
                raise Cancelled("Prediction was cancelled.")
            stop = min(start + step, grid.n_rows)
            centres = grid.cell_centres(start, stop)
            keep = np.ones(len(centres), bool) if inside is None else inside[start:stop].ravel()
            columns = None
            if covariates is not None and keep.any():
                columns = covariates(start, stop)
                usable = np.all(np.isfinite(columns), axis=1)
                no_covariate += int(np.count_nonzero(keep & ~usable))
                keep = keep & usable
                columns = columns[keep]
            bands = [{kind: np.full(len(centres), np.nan) for kind in field_writers} for field_writers in writers]
            distance = np.full(len(centres), np.nan)
            if keep.any():
                def block_progress(fraction: float, start: int = start, stop: int = stop) -> None:
                    if progress is not None:
                        progress((start + fraction * (stop - start)) / grid.n_rows)

                found = predict_points(predict, centres[keep], scale, kinds_asked,
                                       variance_factors=[output.variance_factor for output in fields], check=check,
                                       covariates=columns, progress=block_progress, should_stop=should_stop)
                kriged += len(found.resolved)
                unresolved += int(np.count_nonzero(~found.resolved))
                if distance_writer is not None:
                    distance[keep] = check.distances(centres[keep])
                for column, (output, field_bands) in enumerate(zip(fields, bands)):
                    for kind in field_bands:
                        values = found.layers[column][kind]
                        field_bands[kind][keep] = values
                        lost[f"{output.field} {kind}"] += int(np.count_nonzero(found.kept[:, column]
                                                                               & unwritable(values)))
            for field_writers, field_bands in zip(writers, bands):
                for kind, writer in field_writers.items():
                    writer.write_block(0, start, field_bands[kind])
            if distance_writer is not None:
                distance_writer.write_block(0, start, distance)
            if progress is not None:
                progress(stop / grid.n_rows)
        counts = NodataCounts(kriged, unresolved, lost, no_covariate)
        if counts.error() is not None:
            raise counts.error()
        for writer in [*(writer for field_writers in writers for writer in field_writers.values()),
                       *([distance_writer] if distance_writer is not None else [])]:
            writer.commit()
    return counts
