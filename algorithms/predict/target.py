"""What a prediction is of: the true value at a place, or a new measurement there (PREDICT_TARGET).

The kriging variance of :mod:`.kriging` is that of the error in predicting the
latent field, the true value without measurement error. A new measurement at
the place adds its own error, independent of the prediction's (the ordinary
kriging equations of Cressie 1993, *Statistics for Spatial Data*, rev. ed.,
section 3.2; the section number of its measurement-error discussion from memory)::

    variance(new measurement) = variance(true value) + nugget + e_new

The rule for how the model's nugget and per-sample error variances combine: the
samples' error variances ``e_i`` (data) and the nugget (model) both sit on the
diagonal of the observations' covariance, and neither is part of the true value.
A new measurement carries the nugget and, when the samples carried error
variances, the median of theirs as its own ``e_new`` (a typical measurement of
the same kind; common practice where no other figure is given).
"""
from __future__ import annotations

import numpy as np

from ..errors import FieldcastError
from ..model.covariance import CovarianceModel

PREDICT_TARGETS = ("true", "measurement")
"""PREDICT_TARGET words: the true value (default), or a new measurement at the place."""


def measurement_variance(target: str, covariance: CovarianceModel, error_variance: np.ndarray | None = None,
                         support: str = "point") -> float | None:
    """The variance a prediction of ``target`` adds to the kriging variance: None for the true value, the nugget
    plus the median of ``error_variance`` (modelling units squared) for a new measurement.

    Raises
    ------
    FieldcastError
        For an unknown target, or a new measurement with cell support (a measurement is taken at a point).
    """
    if target not in PREDICT_TARGETS:
        raise FieldcastError(f"PREDICT_TARGET must be one of {', '.join(PREDICT_TARGETS)}; got {target!r}.")
    if target == "true":
        return None
    if support != "point":
        raise FieldcastError("A new measurement is taken at a point: set SUPPORT to point, or PREDICT_TARGET to "
                             "true for the cell average of the true value.")
    own = 0.0 if error_variance is None or not len(error_variance) else float(np.median(error_variance))
    return covariance.nugget + own


def target_words(variance: float | None, error_variance: np.ndarray | None = None) -> str:
    """The log line that says what the variances are of."""
    if variance is None:
        return ("Predicting the true value: the variances leave out the nugget"
                + (" and the samples' error variances" if error_variance is not None else "")
                + " (set PREDICT_TARGET to measurement for the spread of a new measurement).")
    own = " and the samples' median error variance" if error_variance is not None else ""
    return (f"Predicting a new measurement: the variances include {variance:.4g} (modelling units squared: the "
            f"nugget{own}), the error a new measurement adds to the true value.")
