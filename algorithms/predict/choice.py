"""Which samples each target is kriged from: the one place that turns NEIGHBOURS and SEARCH_RADIUS into a predictor.

Every toolbox algorithm that krigs (predict, predictmany, crossvalidate, simulate)
reads its NEIGHBOURS (0 = every sample) and SEARCH_RADIUS (empty = no limit) into a
:class:`Neighbourhood`, which checks them once (:meth:`Neighbourhood.resolved`) and,
for the surface algorithms, builds the global or local predictor
(:func:`choose_predictor`), for crossvalidate runs the global or local leave-one-out
(:func:`cross_validate_with`, by the same rules). All three return the log lines to show, as :class:`LogLine`
values, so the plugin only passes them on.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ..errors import FieldcastError
from ..model.covariance import CovarianceModel
from ..model.mean import MeanModel
from .crossval import CrossValidation, leave_one_out, local_leave_one_out
from .global_trend import local_trend_options
from .kriging import KrigingPredictor
from .local import LocalKrigingPredictor

GLOBAL_SAMPLE_LIMIT = 5000
"""Most samples kriged all together when NEIGHBOURS is 0; above it each cell uses its nearest
:data:`AUTOMATIC_NEIGHBOURS` (a dense system of 5,000 samples already holds 200 MB and solves slowly)."""
AUTOMATIC_NEIGHBOURS = 64
"""Neighbours per cell chosen for NEIGHBOURS = 0 with more than :data:`GLOBAL_SAMPLE_LIMIT` samples."""


@dataclass(frozen=True)
class LogLine:
    """One line for the run's log: ``level`` is ``"info"`` or ``"warning"``."""

    level: str
    text: str


def search_words(search_radius: float | None, units: str) -> str:
    """Log words for a search radius, `` within 300 m (along the major axis ...)``; "" without one."""
    if search_radius is None:
        return ""
    return f" within {search_radius:g} {units} (along the major axis of the model's anisotropy)"


@dataclass(frozen=True)
class Neighbourhood:
    """The samples each target is kriged from.

    Attributes
    ----------
    neighbours : int
        0 = every sample; otherwise the nearest ``neighbours``.
    search_radius : float or None
        Largest distance of a neighbour along the model's major axis (working CRS units; the search
        ellipse follows the anisotropy), None = no limit. Used with local kriging only.
    local_mean : bool
        LOCAL_MEAN: local kriging re-estimates the mean in each neighbourhood. False (the default) krigs the
        residuals of the trend estimated once from all samples (:mod:`.global_trend`), the neighbours spread
        over sectors; a constant or known mean is kriged in each neighbourhood either way.
    """

    neighbours: int = 0
    search_radius: float | None = None
    local_mean: bool = False

    def resolved(self, mean: MeanModel, per: str, pool: str = "every sample") -> tuple[int, list[LogLine]]:
        """Check NEIGHBOURS against the mean model; return it with the log line for an ignored SEARCH_RADIUS.

        ``per`` names what each neighbourhood serves ("cell", "sample") in the refusal; ``pool`` what is
        used when NEIGHBOURS is 0 ("every sample", "every other sample").

        Raises
        ------
        FieldcastError
            If NEIGHBOURS is negative, or from 1 up to the number of trend terms.
        """
        minimum = mean.n_terms + 1
        if self.neighbours < 0 or 0 < self.neighbours < minimum:
            raise FieldcastError(f"NEIGHBOURS is {self.neighbours}, but the {mean.kind} mean of the model needs at "
                                 f"least {minimum} samples per {per}. Set NEIGHBOURS to {minimum} or more (16 to 64 "
                                 "is common practice), or to 0 for all samples.")
        if self.search_radius is not None and self.search_radius <= 0:
            raise FieldcastError(f"SEARCH_RADIUS is {self.search_radius:g}; it must be positive. Enlarge it, or leave "
                                 "it empty for no limit.")
        lines = []
        if self.neighbours == 0 and self.search_radius is not None:
            lines.append(LogLine("warning", f"SEARCH_RADIUS is ignored: {pool} is used (NEIGHBOURS is 0)."))
        return self.neighbours, lines


def _run_neighbours(neighbourhood: Neighbourhood, mean: MeanModel, count: int, per: str, *, support: str = "point",
                    pool: str = "every sample") -> tuple[int, list[LogLine]]:
    """NEIGHBOURS checked (:meth:`Neighbourhood.resolved`), 0 turned into :data:`AUTOMATIC_NEIGHBOURS` above
    :data:`GLOBAL_SAMPLE_LIMIT` samples with point support, and the log lines that say so."""
    neighbours, lines = neighbourhood.resolved(mean, per, pool=pool)
    if neighbours == 0 and count > GLOBAL_SAMPLE_LIMIT and support == "point":
        neighbours = AUTOMATIC_NEIGHBOURS
        lines.append(LogLine("info", f"NEIGHBOURS is 0 but there are {count:,} samples, more than the "
                                     f"{GLOBAL_SAMPLE_LIMIT:,} kriged all together: each {per} uses its {neighbours} "
                                     "nearest samples instead. Set NEIGHBOURS to choose another number."))
    elif neighbours == 0 and count > GLOBAL_SAMPLE_LIMIT:
        lines.append(LogLine("warning", f"Cell support krigs all {count:,} samples together, which is slow and "
                                        "memory-hungry at this size; point support would use local neighbourhoods."))
    return neighbours, lines


def refuse_local_covariates(mean: MeanModel, neighbours: int, count: int, *, local_mean: bool = True) -> None:
    """FieldcastError when local kriging (``neighbours`` > 0 of ``count`` samples) that re-estimates the mean in
    each neighbourhood (``local_mean``) meets a mean with covariates.

    Covariate coefficients are estimated from all samples (GLS); local kriging that re-estimated them from each
    neighbourhood's few samples would extrapolate a local trend. With ``local_mean`` False the global trend is
    used (:mod:`.global_trend`) and nothing is refused; the message names the LOCAL_MEAN switch.
    """
    if not (neighbours and mean.covariate_names and local_mean):
        return
    automatic = count > GLOBAL_SAMPLE_LIMIT
    raise FieldcastError(
        "Covariates are kriged from all samples, so that their coefficients rest on every sample and not on "
        f"each neighbourhood's few; local kriging ({neighbours} neighbours"
        + (f", chosen because there are more than {GLOBAL_SAMPLE_LIMIT:,} samples" if automatic else "")
        + ") re-estimates the mean in each neighbourhood. Untick LOCAL_MEAN, set NEIGHBOURS to 0"
        + (", thin the samples" if automatic else "") + ", or leave COVARIATES and CLASS_COVARIATES empty.")


def choose_predictor(xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel,
                     neighbourhood: Neighbourhood, *, support: str = "point", units: str = "metre",
                     per: str = "cell", covariates: np.ndarray | None = None,
                     error_variance: np.ndarray | None = None,
                     ) -> tuple[KrigingPredictor | LocalKrigingPredictor, list[LogLine]]:
    """The kriging predictor of a run, global or local, and the log lines that say which and why.

    With NEIGHBOURS 0, every sample is kriged together, except above :data:`GLOBAL_SAMPLE_LIMIT`
    samples with point support, where each target uses its :data:`AUTOMATIC_NEIGHBOURS` nearest.

    Parameters
    ----------
    xy : ndarray, shape (n, 2)
        Sample coordinates, working CRS units.
    values : ndarray, shape (n,) or (n, k)
        Values in the modelling scale, one column per field.
    covariance, mean : CovarianceModel, MeanModel
        The model.
    neighbourhood : Neighbourhood
        NEIGHBOURS, SEARCH_RADIUS and LOCAL_MEAN as chosen.
    support : str
        ``"point"`` or ``"cell"`` (block kriging, global only).
    units : str
        Working CRS unit, for the log.
    per : str
        What each target is called in the log and the refusals ("cell", "target point").
    covariates : ndarray, shape (n, c), optional
        The mean's covariate columns at the samples, when it names covariates.
    error_variance : ndarray, shape (n,), optional
        Per-sample measurement-error variances (modelling units squared), on the diagonal beside the nugget.

    Raises
    ------
    FieldcastError
        If NEIGHBOURS is too small for the mean model, local kriging is asked for cell support, or local kriging
        that re-estimates the mean would be used with covariates.
    """
    count = len(values)
    neighbours, lines = _run_neighbours(neighbourhood, mean, count, per, support=support)
    local_mean = neighbourhood.local_mean
    refuse_local_covariates(mean, neighbours, count, local_mean=local_mean)
    if neighbours == 0:
        lines.append(LogLine("info", f"Kriging from all {count} samples."))
        predictor = KrigingPredictor(xy, values, covariance, mean, covariates, error_variance)
        return predictor, lines + [LogLine("warning", warning) for warning in predictor.warnings]
    if support != "point":
        raise FieldcastError("Cell support is computed from all samples (block kriging); local "
                             "neighbourhoods are for point support. Set NEIGHBOURS to 0, or SUPPORT to point.")
    options, words = local_trend_options(xy, values, covariance, mean, covariates, local_mean, error_variance)
    predictor = LocalKrigingPredictor(xy, values, covariance, mean, neighbours=neighbours, covariates=covariates,
                                      search_radius=neighbourhood.search_radius, error_variance=error_variance,
                                      **options)
    sharing = predictor.sharing_words(per)
    shared = f" ({sharing})" if sharing else ""
    lines.append(LogLine("info", f"Local kriging: each {per} from its {min(neighbours, count)} nearest "
                                 f"samples{search_words(neighbourhood.search_radius, units)}{shared}{words}."))
    return predictor, lines


def cross_validate_with(xy: np.ndarray, values: np.ndarray, covariance: CovarianceModel, mean: MeanModel,
                        neighbourhood: Neighbourhood, *, covariates: np.ndarray | None = None, units: str = "metre",
                        error_variance: np.ndarray | None = None, progress: Callable[[float], None] | None = None,
                        should_stop: Callable[[], bool] | None = None) -> tuple[CrossValidation, list[LogLine]]:
    """Leave-one-out of a run, global (closed form) or local by the same rules as :func:`choose_predictor`,
    and the log lines that say which and how many samples got no prediction.

    With NEIGHBOURS 0 each sample is predicted from every other one (:func:`.crossval.leave_one_out`),
    except above :data:`GLOBAL_SAMPLE_LIMIT` samples, where each uses its :data:`AUTOMATIC_NEIGHBOURS`
    nearest (:func:`.crossval.local_leave_one_out`, as are all runs with NEIGHBOURS > 0).

    Parameters
    ----------
    xy, values, covariance, mean, neighbourhood
        As for :func:`choose_predictor` (one field of values).
    covariates : ndarray of shape (n, c), optional
        The mean's covariate columns at the samples.
    units : str
        Working CRS unit, for the log.
    error_variance : ndarray of shape (n,), optional
        Per-sample measurement-error variances, as for :func:`choose_predictor`.
        With the global trend (LOCAL_MEAN off) its coefficients rest on every sample, the left-out one included.
    progress, should_stop : callable, optional
        Progress (fraction) and cancel of the local leave-one-out.

    Raises
    ------
    FieldcastError
        If NEIGHBOURS is too small for the mean model, local leave-one-out meets covariates, or no sample
        has enough other samples within SEARCH_RADIUS.
    """
    count = len(values)
    neighbours, lines = _run_neighbours(neighbourhood, mean, count, "sample", pool="every other sample")
    local_mean = neighbourhood.local_mean
    refuse_local_covariates(mean, neighbours, count, local_mean=local_mean)
    if neighbours == 0:
        return leave_one_out(xy, values, covariance, mean, covariates, error_variance), lines
    search_radius = neighbourhood.search_radius
    options, words = local_trend_options(xy, values, covariance, mean, covariates, local_mean, error_variance)
    lines.append(LogLine("info", f"Local leave-one-out: each sample from its {min(neighbours, count - 1)} nearest "
                                 f"other samples{search_words(search_radius, units)}{words}."))
    result = local_leave_one_out(xy, values, covariance, mean, neighbours=neighbours, search_radius=search_radius,
                                 covariates=covariates, error_variance=error_variance, progress=progress,
                                 should_stop=should_stop, **options)
    unresolved = count - result.summary()["n"]
    if unresolved == count:
        raise FieldcastError("No sample has enough other samples within SEARCH_RADIUS to be predicted. "
                             "Enlarge SEARCH_RADIUS, or leave it empty.")
    if unresolved:
        lines.append(LogLine("warning", f"{unresolved:,} sample(s) have too few other samples within SEARCH_RADIUS "
                                        "(or neighbours that make a singular system): they get no prediction and are "
                                        "left out of the summary. Enlarge SEARCH_RADIUS, or leave it empty, to "
                                        "include them."))
    return result, lines
