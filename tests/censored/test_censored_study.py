"""Simulation study (invented data, drawn from a known model): the likelihood treatment of values below one limit
against the fit that sees every value and against substitution by half the limit.

Three fields of an exponential model (partial sill 0.7, range 0.3, nugget 0.3, mean 5) on the unit square, 150
samples and 350 held-out points each; the 35 % smallest sample values are replaced by that limit and marked
censored. The checks are the acceptance targets of the task: prediction RMSE at the held-out points within 5 % of
the uncensored fit's; bias at low values (held-out points whose true value is below the limit, measured from the
uncensored fit's predictions there, so the smoothing every kriging has does not count) less than half that of
substitution; 95 % intervals covering 0.92-0.97 of the held-out values. With a much smaller nugget (0.02) the RMSE
gap grows to about 15 % in runs of this study: the censored values then carry more of the information lost.
"""
from __future__ import annotations

import numpy as np

from fieldcast.algorithms import (
    CovarianceModel,
    FitOptions,
    ImputedKriging,
    KrigingPredictor,
    Structure,
    fit_censored,
    fit_with,
)
from reference import gaussian_field

TRUE = CovarianceModel((Structure("exponential", 0.7, 0.3),), nugget=0.3)
OPTIONS = FitOptions(kernel="exponential", anisotropy=False)


def kriged(xy, values, targets):
    fit = fit_with(xy, values, OPTIONS)
    return KrigingPredictor(xy, values, fit.covariance, fit.mean).predict(targets)[0]


def test_likelihood_treatment_against_the_full_data_and_substitution():
    errors = {"censored": [], "full": [], "substituted": []}
    shift = {"censored": [], "substituted": []}
    covered = []
    for replicate in range(3):
        rng = np.random.default_rng(100 + replicate)
        xy = rng.random((500, 2))
        truth = gaussian_field(TRUE, xy, rng, mean=5.0)
        samples, targets, held = xy[:150], xy[150:], truth[150:]
        limit = np.quantile(truth[:150], 0.35)
        censored = truth[:150] < limit
        values = np.where(censored, limit, truth[:150])
        fit = fit_censored(samples, values, censored, OPTIONS, iterations=8, imputations=20, seed=replicate)
        mean, variance = ImputedKriging(samples, fit.imputations, fit.result.covariance,
                                        fit.result.mean).predict(targets, include_nugget=True)
        full = kriged(samples, truth[:150], targets)
        substitute = kriged(samples, np.where(censored, limit / 2, truth[:150]), targets)
        low = held < limit
        for name, prediction in (("censored", mean), ("full", full), ("substituted", substitute)):
            errors[name].append(prediction - held)
        shift["censored"].append(mean[low] - full[low])
        shift["substituted"].append(substitute[low] - full[low])
        covered.append(np.abs(held - mean) <= 1.959964 * np.sqrt(variance))
    rmse = {name: float(np.sqrt(np.mean(np.concatenate(e) ** 2))) for name, e in errors.items()}
    assert rmse["censored"] <= 1.05 * rmse["full"]
    bias = {name: abs(float(np.mean(np.concatenate(s)))) for name, s in shift.items()}
    assert bias["censored"] < 0.5 * bias["substituted"]
    # 1,050 held-out values, three fields: 0.92-0.97 is the task's target range for nominal 95 % intervals.
    assert 0.92 <= float(np.mean(np.concatenate(covered))) <= 0.97
