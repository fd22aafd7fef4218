"""Per-polygon averages on Meuse (published data) with polygons built here, against independent computations.

The conditional law of a polygon's points is computed here from the ordinary-kriging system with its
Lagrange multiplier (Cressie 1993, *Statistics for Spatial Data*, rev. ed., section 3.2), not from the
engine's GLS route; the lognormal moments are those of Aitchison & Brown 1957.
"""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import ogr
from scipy import stats

from fieldcast.algorithms.errors import Cancelled, FieldcastError
from fieldcast.algorithms.io.polygons import discretise_polygon
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.model.transform import Transform
from fieldcast.algorithms.predict import areas
from fieldcast.algorithms.predict.areas import assess_areas
from fieldcast.algorithms.predict.kriging import KrigingPredictor
from reference import MEUSE_LOG_ZINC, ordinary_joint_law

REALIZATIONS = 4000
# An inland unit and one near the river (high zinc) with a hole, in EPSG:28992 metres (built for this test).
UNITS = ["POLYGON ((179900 331500, 180300 331500, 180300 331900, 179900 331900, 179900 331500))",
         "POLYGON ((180300 332300, 180800 332300, 180800 332700, 180300 332700, 180300 332300),"
         " (180450 332420, 180650 332420, 180650 332580, 180450 332580, 180450 332420))"]


def wkb(wkt: str) -> bytes:
    return bytes(ogr.CreateGeometryFromWkt(wkt).ExportToWkb())


def cdf_at(sample: np.ndarray, value: float) -> float:
    return float(np.mean(sample <= value))


def test_log_units_have_the_exact_lognormal_mean_and_a_monte_carlo_exceedance(meuse):
    y = np.log(meuse.zinc)
    threshold = 500.0
    result = assess_areas(meuse.xy, y, MEUSE_LOG_ZINC, MeanModel("constant"), Transform("log"),
                          [wkb(u) for u in UNITS], threshold, realisations=REALIZATIONS, seed=4, depths=0.3)
    rng = np.random.default_rng(99)
    for index, unit in enumerate(UNITS):
        points = discretise_polygon(wkb(unit)).points
        assert result.points[index] == len(points)
        mu, joint, _ = ordinary_joint_law(meuse.xy, y, MEUSE_LOG_ZINC, points)
        # exact expectation of the arithmetic average of a lognormal vector, E exp(Y_i) = exp(mu_i + S_ii / 2)
        assert result.values["mean"][index] == pytest.approx(np.mean(np.exp(mu + np.diag(joint) / 2)), rel=1e-8)
        draws = rng.multivariate_normal(mu, joint, size=REALIZATIONS, method="eigh").T
        averages = np.exp(draws).mean(axis=0)
        p = float(np.mean(averages > threshold))
        # two independent Monte Carlo estimates of one probability: difference sd sqrt(2 p (1 - p) / R), 4 sd allowed
        error = 4.0 * np.sqrt(2.0 * max(p * (1 - p), 1e-4) / REALIZATIONS)
        assert result.values["pexc"][index] == pytest.approx(p, abs=error)
        # percentiles: the engine's P10/P50/P90 sit at those levels of the reference draws' distribution
        for percent in (10, 50, 90):
            level = percent / 100.0
            assert cdf_at(averages, result.values[f"p{percent}"][index]) == pytest.approx(
                level, abs=4.0 * np.sqrt(2.0 * level * (1 - level) / REALIZATIONS))
        # exact lognormal standard deviation of the average against the draws' (relative sd about 1/sqrt(2R))
        assert result.values["sd"][index] == pytest.approx(np.std(averages), rel=4.0 / np.sqrt(REALIZATIONS / 2))
        share = stats.norm.sf((np.log(threshold) - mu) / np.sqrt(np.diag(joint)))
        assert result.values["share_above"][index] == pytest.approx(share.mean(), abs=1e-9)
        volumes = result.values["area"][index] * np.mean(draws > np.log(threshold), axis=0) * 0.3
        assert cdf_at(volumes, result.values["volume_p50"][index]) >= 0.5 - 4.0 * np.sqrt(0.5 / REALIZATIONS)
        assert cdf_at(volumes, result.values["volume_p50"][index] - 1e-9) <= 0.5 + 4.0 * np.sqrt(0.5 / REALIZATIONS)
    assert result.values["mean"][1] > result.values["mean"][0]  # the river unit carries more zinc
    assert result.values["area"][1] == pytest.approx(500 * 400 - 200 * 160)


def test_untransformed_units_are_block_kriging_as_averaged_point_weights(meuse):
    # Block kriging: the block's weights are the average of the point weights over its discretisation
    # (Journel & Huijbregts 1978, *Mining Geostatistics*); the block variance is the mean of the joint error
    # covariance over all pairs, and the average is Gaussian: P(Z_A > t) = 1 - Phi((t - m) / s) in closed form.
    y = np.log(meuse.zinc)
    result = assess_areas(meuse.xy, y, MEUSE_LOG_ZINC, MeanModel("constant"), Transform("none"),
                          [wkb(u) for u in UNITS], 6.0, realisations=200, seed=1)
    predictor = KrigingPredictor(meuse.xy, y, MEUSE_LOG_ZINC, MeanModel("constant"))
    for index, unit in enumerate(UNITS):
        points = discretise_polygon(wkb(unit)).points
        mu, joint, weights = ordinary_joint_law(meuse.xy, y, MEUSE_LOG_ZINC, points)
        assert result.values["mean"][index] == pytest.approx(predictor.weights(points).mean(axis=1) @ y, rel=1e-10)
        assert result.values["mean"][index] == pytest.approx(weights.mean(axis=1) @ y, rel=1e-10)
        sd = np.sqrt(joint.mean())
        assert result.values["sd"][index] == pytest.approx(sd, rel=1e-7)
        m = weights.mean(axis=1) @ y
        assert result.values["pexc"][index] == pytest.approx(stats.norm.sf((6.0 - m) / sd), abs=1e-8)
        assert result.values["p90"][index] == pytest.approx(m + stats.norm.ppf(0.9) * sd, rel=1e-8)
    assert np.all(np.isnan(result.values["volume_p50"]))  # no depth, no volume


def test_nearest_samples_per_polygon_stay_close_to_all_samples(meuse, monkeypatch):
    y = np.log(meuse.zinc)
    args = (meuse.xy, y, MEUSE_LOG_ZINC, MeanModel("constant"), Transform("log"), [wkb(u) for u in UNITS], 500.0)
    every = assess_areas(*args, realisations=100, seed=2)
    monkeypatch.setattr(areas, "GLOBAL_AREA_LIMIT", 50)
    nearest = assess_areas(*args, realisations=100, seed=2)
    # a local neighbourhood of about 32 samples per point changes the average little (common practice)
    assert nearest.values["mean"] == pytest.approx(every.values["mean"], rel=0.05)


def test_a_sliver_is_kriged_at_its_centroid_and_flagged(meuse):
    sliver = wkb("POLYGON ((180000 331600, 180100 331600, 180100 331600.01, 180000 331600.01, 180000 331600))")
    result = assess_areas(meuse.xy, np.log(meuse.zinc), MEUSE_LOG_ZINC, MeanModel("constant"), Transform("log"),
                          [sliver], 500.0, realisations=50, seed=0)
    assert result.centroid_only.tolist() == [True] and result.points.tolist() == [1]
    assert any("centroid" in line.text for line in result.log_lines("metres"))


def test_bad_inputs_say_what_to_change_and_cancel_stops(meuse):
    args = (meuse.xy, np.log(meuse.zinc), MEUSE_LOG_ZINC, MeanModel("constant"), Transform("log"), [wkb(UNITS[0])])
    with pytest.raises(FieldcastError, match="REALIZATIONS is 3; give at least 10"):
        assess_areas(*args, 500.0, realisations=3)
    with pytest.raises(FieldcastError, match="THRESHOLD must be a finite number"):
        assess_areas(*args, float("nan"))
    with pytest.raises(Cancelled):
        assess_areas(*args, 500.0, should_stop=lambda: True)
