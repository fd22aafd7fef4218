"""Polygon averages with values below a limit (completed data sets) and with per-sample error variances.

Data: the published Meuse samples (Rikken & Van Rijn 1993, tests/data/README.md); the 15 smallest log-zinc values
are treated as reporting limits, and the error variances are a stated test diagonal (Meuse publishes none). The
references are computed here: the bordered ordinary-kriging system (Cressie 1993, *Statistics for Spatial Data*,
rev. ed., sections 3.2 and 5.2: the block average as the average of point kriging), Rubin's rules for combining
completed data sets (Rubin 1987, *Multiple Imputation for Nonresponse in Surveys*: mean of the estimates, and
within variance plus (1 + 1/m) times the between variance) and single-set runs of the engine.
"""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import ogr
from scipy import stats

from fieldcast.algorithms.censored.imputed_kriging import impute_censored
from fieldcast.algorithms.io.polygons import discretise_polygon
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict.areas import assess_areas
from reference import MEUSE_LOG_ZINC, ordinary_joint_law

# An inland unit and one near the river, in EPSG:28992 metres (built for this test).
UNITS = ["POLYGON ((179900 331500, 180300 331500, 180300 331900, 179900 331900, 179900 331500))",
         "POLYGON ((180300 332300, 180800 332300, 180800 332700, 180300 332700, 180300 332300))"]
POLYGONS = [bytes(ogr.CreateGeometryFromWkt(unit).ExportToWkb()) for unit in UNITS]
SETS = 6


def bordered_block(xy, y, points, diagonal):
    """Mean and variance of the average over ``points`` by ordinary kriging with ``diagonal`` added to the samples'
    covariance (nugget included), from the bordered system solved directly (Cressie 1993, sections 3.2, 5.2)."""
    mu, joint, _ = ordinary_joint_law(xy, y, MEUSE_LOG_ZINC, points, diagonal)
    return float(np.mean(mu)), float(np.mean(joint))


@pytest.fixture(scope="module")
def completed(meuse):
    y = np.log(meuse.zinc)
    censored = y <= np.sort(y)[14]
    sets = impute_censored(meuse.xy, y, censored, MEUSE_LOG_ZINC, MeanModel("constant"), np.array([np.mean(y)]),
                           count=SETS, seed=3)
    return y, sets


def run(meuse, values, transform, **options):
    return assess_areas(meuse.xy, values, MEUSE_LOG_ZINC, MeanModel("constant"), Transform(transform), POLYGONS,
                        500.0 if transform == "log" else 6.0, realisations=2000, seed=5, depths=0.3, **options)


@pytest.mark.parametrize("transform", ["none", "log"])
def test_one_set_without_limits_changes_nothing(meuse, transform):
    y = np.log(meuse.zinc)
    alone, as_set = run(meuse, y, transform), run(meuse, y, transform, value_sets=y[None, :])
    for name, values in alone.values.items():
        np.testing.assert_allclose(as_set.values[name], values, rtol=1e-12, err_msg=name)


def test_no_transform_combines_the_sets_by_rubins_rules(meuse, completed):
    y, sets = completed
    result = run(meuse, sets.mean(axis=0), "none", value_sets=sets)
    for index, polygon in enumerate(POLYGONS):
        points = discretise_polygon(polygon).points
        per_set = [bordered_block(meuse.xy, values, points, np.zeros(len(y))) for values in sets]
        means, within = np.array([mean for mean, _ in per_set]), per_set[0][1]
        variance = within + (1 + 1 / SETS) * means.var(ddof=1)  # Rubin 1987
        assert result.values["mean"][index] == pytest.approx(means.mean(), rel=1e-8)
        assert result.values["sd"][index] == pytest.approx(np.sqrt(variance), rel=1e-8)
        assert result.values["pexc"][index] == pytest.approx(stats.norm.sf((6.0 - means.mean()) / np.sqrt(variance)),
                                                             abs=1e-8)
        assert means.var() > 0  # the sets differ, so the check above tells Rubin's variance from the within one


def test_log_model_averages_the_single_set_results(meuse, completed):
    y, sets = completed
    result = run(meuse, sets.mean(axis=0), "log", value_sets=sets)
    singles = [run(meuse, values, "log") for values in sets]
    for index in range(len(POLYGONS)):
        means = np.array([single.values["mean"][index] for single in singles])
        within = np.mean([single.values["sd"][index] ** 2 for single in singles])
        assert result.values["mean"][index] == pytest.approx(means.mean(), rel=1e-10)
        assert result.values["sd"][index] == pytest.approx(
            np.sqrt(within + (1 + 1 / SETS) * means.var(ddof=1)), rel=1e-10)  # Rubin 1987
        # draws cycle through the sets: the probability is the sets' average one, up to Monte Carlo error
        # (each estimate from 2000 draws; 4 sd of the difference allowed)
        p = np.mean([single.values["pexc"][index] for single in singles])
        error = 4.0 * np.sqrt(2.0 * max(p * (1 - p), 1e-4) / 2000)
        assert result.values["pexc"][index] == pytest.approx(p, abs=error)


def test_error_variances_enter_the_samples_diagonal(meuse):
    y = np.log(meuse.zinc)
    diagonal = 0.02 + 0.02 * (np.arange(len(y)) % 5)  # stated test diagonal, log units squared
    result = run(meuse, y, "none", error_variance=diagonal)
    plain = run(meuse, y, "none")
    for index, polygon in enumerate(POLYGONS):
        mean, variance = bordered_block(meuse.xy, y, discretise_polygon(polygon).points, diagonal)
        assert result.values["mean"][index] == pytest.approx(mean, rel=1e-8)
        assert result.values["sd"][index] == pytest.approx(np.sqrt(variance), rel=1e-8)
        assert result.values["sd"][index] > plain.values["sd"][index]
