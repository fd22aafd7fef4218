"""Greedy sample design (propose_samples) against brute force refits of the full kriging system.

Data: the published Meuse samples (tests/data/README.md), log zinc, with the one Meuse model MEUSE_LOG_ZINC
(tests/reference.py). Evaluation points and candidates are cells of the published Meuse grid. Brute force
adds each candidate as a sample and refits KrigingPredictor (the sample value does not enter the variance).
"""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import ogr
from scipy import stats

from fieldcast.algorithms import FieldcastError, KrigingPredictor, MeanModel, Region, propose_samples
from fieldcast.algorithms.predict import design
from fieldcast.algorithms.predict.design import expected_misclassification
from reference import MEUSE_LOG_ZINC

THRESHOLD = float(np.log(500.0))  # 500 ppm zinc, the level the Meuse maps are usually read against (from memory)


@pytest.fixture(scope="module", params=["constant", "linear"])
def case(request, meuse, meuse_grid):
    """Kriging of Meuse log zinc, 400 grid cells as evaluation points and 30 others as candidates."""
    mean = MeanModel.for_data(request.param, meuse.xy)
    predictor = KrigingPredictor(meuse.xy, np.log(meuse.zinc), MEUSE_LOG_ZINC, mean)
    rng = np.random.default_rng(14)
    order = rng.permutation(len(meuse_grid.xy))
    return predictor, meuse_grid.xy[order[:400]], meuse_grid.xy[order[400:430]], meuse, mean


def refit(meuse, mean, added: np.ndarray, values: np.ndarray | None = None) -> KrigingPredictor:
    """Kriging from the Meuse samples plus ``added`` places (with ``values``, zeros when only variances count)."""
    values = np.zeros(len(added)) if values is None else values
    return KrigingPredictor(np.vstack([meuse.xy, added]), np.r_[np.log(meuse.zinc), values], MEUSE_LOG_ZINC, mean)


def test_variance_design_equals_brute_force_for_the_first_two_picks(case):
    predictor, evaluation, candidates, meuse, mean = case
    proposal = propose_samples(predictor, evaluation, candidates, 2)
    first = [refit(meuse, mean, candidates[[c]]).predict(evaluation)[1].mean() for c in range(len(candidates))]
    assert proposal.picks[0] == int(np.argmin(first))
    second = [np.inf if c == proposal.picks[0] else
              refit(meuse, mean, candidates[[proposal.picks[0], c]]).predict(evaluation)[1].mean()
              for c in range(len(candidates))]
    assert proposal.picks[1] == int(np.argmin(second))
    np.testing.assert_allclose(proposal.after, [min(first), min(second)], rtol=1e-9)
    assert proposal.before == pytest.approx(predictor.predict(evaluation)[1].mean(), rel=1e-9)


def preposterior_misclassification(predictor, meuse, mean, evaluation, place: np.ndarray) -> float:
    """Mean E[p (1 - p)] after one new measurement at ``place``: its value drawn from its predictive law (the
    current kriging, nugget added) by Gauss-Hermite quadrature (numpy's hermgauss, physicists' weights), the
    full system refitted at each node."""
    centre, spread = predictor.predict(place[None], include_nugget=True)
    nodes, weights = np.polynomial.hermite.hermgauss(24)
    total = 0.0
    for node, weight in zip(nodes, weights):
        value = centre[0] + np.sqrt(2.0 * spread[0]) * node
        future_mean, future_variance = refit(meuse, mean, place[None], np.array([value])).predict(evaluation)
        p = stats.norm.sf((THRESHOLD - future_mean) / np.sqrt(future_variance))
        total += weight * np.mean(p * (1.0 - p))
    return total / np.sqrt(np.pi)


def test_classification_design_equals_brute_force_for_the_first_two_picks(case):
    predictor, evaluation, candidates, meuse, mean = case
    proposal = propose_samples(predictor, evaluation, candidates, 2, criterion="classification", level=THRESHOLD)
    first = [preposterior_misclassification(predictor, meuse, mean, evaluation, place) for place in candidates]
    assert proposal.picks[0] == int(np.argmin(first))
    # Two new values: the future mean at a point is normal around today's with variance s2 - s2' (s2' from
    # the refit with both places); E[p (1 - p)] over it by Gauss-Hermite quadrature.
    today_mean, today_variance = predictor.predict(evaluation)
    nodes, weights = np.polynomial.hermite.hermgauss(40)

    def after_two(place: int) -> float:
        variance = refit(meuse, mean, candidates[[proposal.picks[0], place]]).predict(evaluation)[1]
        shift = np.sqrt(np.clip(today_variance - variance, 0.0, None))
        p = stats.norm.sf((THRESHOLD - today_mean[:, None] - np.sqrt(2.0) * shift[:, None] * nodes)
                          / np.sqrt(variance)[:, None])
        return float(np.mean((p * (1.0 - p)) @ weights) / np.sqrt(np.pi))

    second = [np.inf if c == proposal.picks[0] else after_two(c) for c in range(len(candidates))]
    assert proposal.picks[1] == int(np.argmin(second))
    np.testing.assert_allclose(proposal.after, [min(first), min(second)], rtol=1e-5)


@pytest.mark.parametrize(("h", "r"), [(0.3, 0.2), (-1.2, 0.7), (2.0, 0.95), (0.0, 0.5), (-3.0, 0.05)])
def test_expected_misclassification_is_phi_minus_bivariate_phi(h, r):
    # E[p (1 - p)] = Phi(h) - Phi2(h, h; r): scipy's bivariate normal distribution function as the reference.
    reference = stats.norm.cdf(h) - stats.multivariate_normal([0.0, 0.0], [[1.0, r], [r, 1.0]]).cdf([h, h])
    assert expected_misclassification(np.array(h), np.array(r)) == pytest.approx(reference, abs=1e-7)


def test_variance_design_beats_a_regular_grid_at_several_offsets(meuse):
    # A 4 x 4 regular grid over a rectangle of the Meuse area against 16 greedy picks among its lattice.
    x_min, y_min, x_max, y_max = 178600.0, 330200.0, 181400.0, 333600.0
    ring = f"POLYGON(({x_min} {y_min},{x_max} {y_min},{x_max} {y_max},{x_min} {y_max},{x_min} {y_min}))"
    region = Region.from_shapes([ogr.CreateGeometryFromWkt(ring).ExportToWkb()])
    evaluation, _ = region.lattice(600)
    candidates, _ = region.lattice(900)
    mean = MeanModel.for_data("constant", meuse.xy)
    predictor = KrigingPredictor(meuse.xy, np.log(meuse.zinc), MEUSE_LOG_ZINC, mean)
    proposal = propose_samples(predictor, evaluation, candidates, 16)
    greedy = refit(meuse, mean, proposal.xy).predict(evaluation)[1].mean()
    assert greedy == pytest.approx(proposal.after[-1], rel=1e-9)
    step_x, step_y = (x_max - x_min) / 4, (y_max - y_min) / 4
    for offset_x, offset_y in [(0.5, 0.5), (0.25, 0.25), (0.75, 0.25), (0.1, 0.9)]:
        grid = np.array([(x_min + (i + offset_x) * step_x, y_min + (j + offset_y) * step_y)
                         for i in range(4) for j in range(4)])
        assert greedy < refit(meuse, mean, grid).predict(evaluation)[1].mean()


def test_min_spacing_keeps_proposals_apart_from_samples_and_each_other(case):
    predictor, evaluation, _, meuse, _ = case
    rng = np.random.default_rng(3)
    candidates = evaluation[rng.permutation(len(evaluation))[:200]]
    proposal = propose_samples(predictor, evaluation, candidates, 6, min_spacing=150.0)
    gaps = np.hypot(*(proposal.xy[:, None, :] - proposal.xy[None, :, :]).transpose(2, 0, 1))
    assert np.min(gaps + np.eye(6) * 1e9) >= 150.0
    assert np.min(np.hypot(*(proposal.xy[:, None, :] - meuse.xy[None, :, :]).transpose(2, 0, 1))) >= 150.0
    assert np.all(np.diff(proposal.after) < 0)


def test_more_proposals_than_candidates_are_refused_with_advice(case):
    predictor, evaluation, candidates, _, _ = case
    with pytest.raises(FieldcastError, match="COUNT is 31 but only 30 candidate place.*Lower COUNT"):
        propose_samples(predictor, evaluation, candidates, 31)
    with pytest.raises(FieldcastError, match="MIN_SPACING = 5000 apart"):
        propose_samples(predictor, evaluation, candidates, 2, min_spacing=5000.0)


def test_classification_without_threshold_is_refused_with_advice(case):
    predictor, evaluation, candidates, _, _ = case
    with pytest.raises(FieldcastError, match="needs a THRESHOLD"):
        propose_samples(predictor, evaluation, candidates, 2, criterion="classification")


def test_screened_classification_steps_match_exact_greedy_steps(case, meuse_grid, monkeypatch):
    # 1,000 candidates: each step scores the best SCREENED by the first-order gain exactly; against every
    # candidate scored exactly (SCREENED above the candidate count), two steps.
    predictor, evaluation, _, _, _ = case
    candidates = meuse_grid.xy[np.random.default_rng(8).permutation(len(meuse_grid.xy))[:1000]]
    screened = propose_samples(predictor, evaluation, candidates, 2, criterion="classification", level=THRESHOLD)
    monkeypatch.setattr(design, "SCREENED", 10_000)
    exact = propose_samples(predictor, evaluation, candidates, 2, criterion="classification", level=THRESHOLD)
    np.testing.assert_allclose(screened.after, exact.after, rtol=1e-3)
