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
from ..model.transform import HERMITE_ORDER, Transform
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
        ``"median"`` (``exp(mu) - offset`` for a log model, the inverse transform ``g(mu)`` in general) or ``"mean"``
        (``exp(mu + s2/2) - offset``; Gauss-Hermite quadrature of ``g`` for Box-Cox and normal-score models).
    support : str
        ``"point"`` (value at the cell centre) or ``"cell"`` (average over the cell).
    threshold : float or None
        Threshold of the exceedance probability, attribute units.
    interval : float
        Probability of the central predictive interval whose ends the ``"lower"`` and ``"upper"``
        rasters hold: the quantiles at ``(1 - interval) / 2`` and ``(1 + interval) / 2``
        (0.9 gives the 5 % and 95 % quantiles).
    measurement_variance : float or None
        None predicts the true value (the kriging variance as it is); a number (modelling units squared, of the
        predictor's model: :func:`.target.measurement_variance`) predicts a new measurement, whose error variance
        adds it to the kriging variance before any field's variance factor.

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
    measurement_variance: float | None = None

    def __post_init__(self) -> None:
        check_interval(self.interval)

    @property
    def variance_words(self) -> str:
        """What the variances leave out or include, for the band descriptions."""
        if self.measurement_variance is None:
            return "nugget excluded"
        return f"of a new measurement: nugget and measurement error {self.measurement_variance:.4g} included"

    @property
    def interval_z(self) -> float:
        """Standard normal quantile of the upper interval end, ``z`` at ``(1 + interval) / 2``."""
        return float(stats.norm.ppf(0.5 + 0.5 * self.interval))

    def values(self, mean: np.ndarray, variance: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Prediction and variance in attribute units (squared for the variance)."""
        if self.backtransform == "mean":
            return self.transform.back_moments(mean, variance)
        return self.transform.back_median(mean), self.transform.back_variance(mean, variance)

    def layers(self, mean: np.ndarray, variance: np.ndarray, kinds) -> dict[str, np.ndarray]:
        """The rasters named in ``kinds`` (of :data:`SURFACE_KINDS`) for modelling-scale ``mean`` and ``variance``."""
        prediction, back_variance = self.values(mean, variance)
        layers = {"prediction": prediction, "variance": back_variance}
        if "sd" in kinds:
            layers["sd"] = np.sqrt(back_variance)  # Transform.back_sd, without a second quadrature
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
                                f"{self.variance_words})",
                    "sd": f"standard error of {field} (attribute units; square root of the kriging error variance "
                          f"{where}, {self.variance_words})",
                    "lower": quantile.format(low, "-"), "upper": quantile.format(high, "+"),
                    "exceedance": exceedance}
        if not self.transform.is_log:
            return self._inverse_descriptions(field, where, exceedance, low, high)
        offset = self.transform.offset
        formula = "exp(mu) - offset" if self.backtransform == "median" else "exp(mu + s2/2) - offset"
        quantile = (f"{{}} quantile of {field} (attribute units; lognormal predictive distribution: exp(mu {{}} z s) "
                    f"- offset, offset {offset:g}; {in_log})")
        return band_words(f"prediction of {field} (attribute units; log model back-transformed to the "
                          f"{self.backtransform}: {formula}, offset {offset:g}; {in_log})",
                          f"variance of {field} (attribute units squared; lognormal: exp(2 mu + s2) (exp(s2) - 1), "
                          f"{self.variance_words}; {in_log})",
                          f"standard error of {field} (attribute units; lognormal: exp(mu + s2/2) sqrt(exp(s2) - 1), "
                          f"{self.variance_words}; {in_log})",
                          (quantile.format(low, "-"), quantile.format(high, "+")),
                          exceedance + (" (threshold log-transformed like the data)" if exceedance else ""))

    def _inverse_descriptions(self, field: str, where: str, exceedance: str, low: str, high: str) -> dict[str, str]:
        """Band descriptions of a Box-Cox (lambda not 0) or normal-score model: back-transforms through the inverse
        ``g`` and Gauss-Hermite quadrature (:mod:`..model.transform`)."""
        scale = self.transform.units_note
        quadrature = f"Gauss-Hermite quadrature, {HERMITE_ORDER} nodes"
        formula = "g(mu), the inverse transform" if self.backtransform == "median" else f"E g(Y), {quadrature}"
        quantile = f"{{}} quantile of {field} (attribute units; g(mu {{}} z s); {where} in the {scale})"
        return band_words(f"prediction of {field} (attribute units; {scale} back-transformed to the "
                          f"{self.backtransform}: {formula}; {where} in the {scale})",
                          f"variance of {field} (attribute units squared; {quadrature}, {self.variance_words}; "
                          f"{where} in the {scale})",
                          f"standard error of {field} (attribute units; square root of the variance by {quadrature}, "
                          f"{self.variance_words}; {where} in the {scale})",
                          (quantile.format(low, "-"), quantile.format(high, "+")),
                          exceedance + (" (threshold transformed like the data)" if exceedance else ""))


def band_words(prediction: str, variance: str, sd: str, quantiles: tuple[str, str], exceedance: str) -> dict[str, str]:
    """The band descriptions of :data:`SURFACE_KINDS` from their words (``quantiles``: the lower and upper end)."""
    return {"prediction": prediction, "variance": variance, "sd": sd, "lower": quantiles[0], "upper": quantiles[1],
            "exceedance": exceedance}


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
        Transform, back-transform, threshold, interval and prediction target of the outputs.
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
    if scale.measurement_variance is not None:
        variance = variance + scale.measurement_variance
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

    @property
    def kinds(self) -> list[str]:
        """The kinds of :data:`SURFACE_KINDS` written for this field, in that order."""
        return [kind for kind in SURFACE_KINDS if self.paths.get(kind)]


def row_blocks(grid: GridSpec, fields: int = 1) -> list[tuple[int, int]]:
    """The ``(row_start, row_stop)`` blocks a grid is kriged in, top to bottom (:func:`block_rows` rows each)."""
    step = block_rows(grid, fields)
    return [(start, min(start + step, grid.n_rows)) for start in range(0, grid.n_rows, step)]


@dataclass(frozen=True)
class SurfaceBlock:
    """What :func:`krige_block` computed for one block of rows.

    Attributes
    ----------
    start : int
        First row of the block.
    bands : list of dict of str to ndarray
        Per field, each kind it writes, in raster order (NaN: nodata).
    distance : ndarray or None
        Distance to the nearest sample per cell (NaN outside the mask), when asked for.
    counts : NodataCounts
        The block's nodata counts.
    """

    start: int
    bands: list[dict[str, np.ndarray]]
    distance: np.ndarray | None
    counts: NodataCounts


def krige_block(predict: CellPredictor, grid: GridSpec, start: int, stop: int, scale: SurfaceScale,
                fields: Sequence[FieldRasters], *, inside: np.ndarray | None = None,
                check: ExtrapolationCheck | None = None, distance: bool = False,
                covariates: Callable[[int, int], np.ndarray] | None = None,
                progress: Callable[[float], None] | None = None,
                should_stop: Callable[[], bool] | None = None) -> SurfaceBlock:
    """Krige the cells of rows ``start`` to ``stop - 1`` of ``grid``: the one step of every grid writer.

    :func:`write_surfaces` calls it block by block in one process, and the cluster runners
    (:mod:`..cluster`) as one task per block, so both write the same numbers. Parameters are those of
    :func:`write_surfaces`, but ``inside`` is the mask of these rows only (``(stop - start, n_cols)``, None:
    every cell), ``distance`` asks for the distance to the nearest sample (needs ``check``), and ``progress``
    gets the fraction of this block done. ``check`` counts the block's cells (see
    :class:`.extrapolation.ExtrapolationCheck`).
    """
    centres = grid.cell_centres(start, stop)
    keep = np.ones(len(centres), bool) if inside is None else np.asarray(inside).ravel()
    columns = None
    no_covariate = 0
    if covariates is not None and keep.any():
        columns = covariates(start, stop)
        usable = np.all(np.isfinite(columns), axis=1)
        no_covariate = int(np.count_nonzero(keep & ~usable))
        keep = keep & usable
        columns = columns[keep]
    bands = [{kind: np.full(len(centres), np.nan) for kind in output.kinds} for output in fields]
    lost = {f"{output.field} {kind}": 0 for output in fields for kind in output.kinds}
    nearest = np.full(len(centres), np.nan) if distance else None
    kriged = unresolved = 0
    if keep.any():
        kinds_asked = [kind for kind in SURFACE_KINDS if any(kind in field_bands for field_bands in bands)]
        found = predict_points(predict, centres[keep], scale, kinds_asked,
                               variance_factors=[output.variance_factor for output in fields], check=check,
                               covariates=columns, progress=progress, should_stop=should_stop)
        kriged, unresolved = len(found.resolved), int(np.count_nonzero(~found.resolved))
        if nearest is not None:
            nearest[keep] = check.distances(centres[keep])
        for column, (output, field_bands) in enumerate(zip(fields, bands)):
            for kind in field_bands:
                values = found.layers[column][kind]
                field_bands[kind][keep] = values
                lost[f"{output.field} {kind}"] += int(np.count_nonzero(found.kept[:, column] & unwritable(values)))
    return SurfaceBlock(start, bands, nearest, NodataCounts(kriged, unresolved, lost, no_covariate))


class SurfaceWriters:
    """The GeoTIFF writers of a grid run, one per field and kind (and the distance raster): blocks go in
    in any order, and :meth:`finish` places every file together.

    Use it as a context manager: leaving the block without :meth:`finish` (an error, a cancel) leaves no file.
    Parameters are those of :func:`write_surfaces`.
    """

    def __init__(self, grid: GridSpec, scale: SurfaceScale, crs_wkt: str, fields: Sequence[FieldRasters],
                 distance_path: str = ""):
        self._stack = contextlib.ExitStack()
        self._staging = staged_together()
        self._writers: list[GeoTiffWriter] = []
        try:
            self._stack.enter_context(self._staging)
            self.distance = (self._open(distance_path, grid, crs_wkt, DISTANCE_DESCRIPTION, fields[0].metadata)
                             if distance_path else None)
            self.fields = []
            for output in fields:
                descriptions = scale.descriptions(output.field)
                self.fields.append({kind: self._open(output.paths[kind], grid, crs_wkt, descriptions[kind],
                                                     output.metadata) for kind in output.kinds})
        except BaseException:
            self._stack.close()
            raise
        self.counts: list[NodataCounts] = []

    def _open(self, path: str, grid: GridSpec, crs_wkt: str, description: str, metadata) -> GeoTiffWriter:
        writer = self._stack.enter_context(GeoTiffWriter(path, grid, 1, crs_wkt, [description], metadata))
        self._writers.append(writer)
        return writer

    def __enter__(self) -> SurfaceWriters:
        return self

    def __exit__(self, exc_type, exc_value, traceback) -> None:
        self._stack.__exit__(exc_type, exc_value, traceback)

    def write(self, block: SurfaceBlock) -> None:
        """Write the rasters of one block and keep its counts."""
        for field_writers, field_bands in zip(self.fields, block.bands):
            for kind, writer in field_writers.items():
                writer.write_block(0, block.start, field_bands[kind])
        if self.distance is not None:
            self.distance.write_block(0, block.start, block.distance)
        self.counts.append(block.counts)

    def finish(self) -> NodataCounts:
        """The run's nodata counts; every file committed together (or, inside an :class:`..io.staging.OutputSet`,
        registered for its commit).

        Raises
        ------
        FieldcastError
            When a raster would be nodata at every resolved cell; no file is left.
        """
        counts = NodataCounts.total(self.counts)
        if counts.error() is not None:
            raise counts.error()
        for writer in self._writers:
            writer.commit()
        self._stack.close()
        return counts


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

    The grid is kriged in the blocks of :func:`row_blocks`, each by :func:`krige_block`. Every field's files
    appear together at the end (or, inside an :class:`..io.staging.OutputSet`, with the set's commit).

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
    with SurfaceWriters(grid, scale, crs_wkt, fields, distance_path) as writers:
        for start, stop in row_blocks(grid, len(fields)):
            if should_stop is not None and should_stop():
                raise Cancelled("Prediction was cancelled.")

            def block_progress(fraction: float, start: int = start, stop: int = stop) -> None:
                if progress is not None:
                    progress((start + fraction * (stop - start)) / grid.n_rows)

            writers.write(krige_block(predict, grid, start, stop, scale, fields,
                                      inside=None if inside is None else inside[start:stop], check=check,
                                      distance=bool(distance_path), covariates=covariates,
                                      progress=block_progress, should_stop=should_stop))
            if progress is not None:
                progress(stop / grid.n_rows)
        return writers.finish()
