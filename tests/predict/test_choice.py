"""The predictor choice (algorithms/predict/choice.py): NEIGHBOURS and SEARCH_RADIUS checked in one place."""
from __future__ import annotations

import numpy as np
import pytest

from fieldcast.algorithms import (
    CovarianceModel,
    FieldcastError,
    KrigingPredictor,
    LocalKrigingPredictor,
    MeanModel,
    Neighbourhood,
    Structure,
    choose_predictor,
    cross_validate_with,
    leave_one_out,
    local_leave_one_out,
)
from fieldcast.algorithms.predict import choice

# An invented exponential model, only to build predictors on the Meuse coordinates.
MODEL = CovarianceModel((Structure("exponential", 0.6, 400.0),), 0.05)


def test_neighbours_zero_krigs_all_samples_and_says_an_ignored_radius(meuse):
    mean = MeanModel.for_data("constant", meuse.xy)
    predictor, lines = choose_predictor(meuse.xy, np.log(meuse.zinc), MODEL, mean, Neighbourhood(0, 300.0))
    assert isinstance(predictor, KrigingPredictor)
    assert [line.level for line in lines] == ["warning", "info"]
    assert "SEARCH_RADIUS is ignored" in lines[0].text and "all 155 samples" in lines[1].text


def test_local_choice_keeps_the_settings(meuse):
    mean = MeanModel.for_data("linear", meuse.xy)
    predictor, lines = choose_predictor(meuse.xy, np.log(meuse.zinc), MODEL, mean, Neighbourhood(16, 500.0))
    assert isinstance(predictor, LocalKrigingPredictor) and predictor.neighbours == 16
    assert "16 nearest samples within 500 metre" in lines[-1].text


def test_above_the_global_limit_point_support_goes_local(meuse, monkeypatch):
    monkeypatch.setattr(choice, "GLOBAL_SAMPLE_LIMIT", 100)  # Meuse's 155 samples stand in for > 5,000
    mean = MeanModel.for_data("constant", meuse.xy)
    predictor, lines = choose_predictor(meuse.xy, np.log(meuse.zinc), MODEL, mean, Neighbourhood())
    assert isinstance(predictor, LocalKrigingPredictor) and predictor.neighbours == choice.AUTOMATIC_NEIGHBOURS
    predictor, lines = choose_predictor(meuse.xy, np.log(meuse.zinc), MODEL, mean, Neighbourhood(), support="cell")
    assert isinstance(predictor, KrigingPredictor) and lines[0].level == "warning"


@pytest.mark.parametrize("neighbourhood, words", [
    (Neighbourhood(3), "NEIGHBOURS is 3, but the linear mean of the model needs at least 4 samples per cell"),
    (Neighbourhood(-1), "NEIGHBOURS is -1"),
    (Neighbourhood(16, 0.0), "SEARCH_RADIUS is 0; it must be positive"),
])
def test_refusals_say_what_to_set(meuse, neighbourhood, words):
    mean = MeanModel.for_data("linear", meuse.xy)
    with pytest.raises(FieldcastError, match=words):
        choose_predictor(meuse.xy, np.log(meuse.zinc), MODEL, mean, neighbourhood)


def test_local_cell_support_is_refused(meuse):
    mean = MeanModel.for_data("constant", meuse.xy)
    with pytest.raises(FieldcastError, match="Set NEIGHBOURS to 0, or SUPPORT to point"):
        choose_predictor(meuse.xy, np.log(meuse.zinc), MODEL, mean, Neighbourhood(16), support="cell")


def test_cross_validation_pool_words():
    _, lines = Neighbourhood(0, 100.0).resolved(MeanModel("constant"), "sample", pool="every other sample")
    assert lines[0].text == "SEARCH_RADIUS is ignored: every other sample is used (NEIGHBOURS is 0)."


def test_cross_validation_with_neighbours_zero_is_the_closed_form(meuse):
    mean = MeanModel.for_data("constant", meuse.xy)
    values = np.log(meuse.zinc)
    result, lines = cross_validate_with(meuse.xy, values, MODEL, mean, Neighbourhood(0, 300.0))
    np.testing.assert_array_equal(result.residual, leave_one_out(meuse.xy, values, MODEL, mean).residual)
    assert [line.text for line in lines] == ["SEARCH_RADIUS is ignored: every other sample is used (NEIGHBOURS is 0)."]


def test_local_cross_validation_says_its_neighbours_and_the_samples_left_out(meuse):
    mean = MeanModel.for_data("constant", meuse.xy)
    values = np.log(meuse.zinc)
    result, lines = cross_validate_with(meuse.xy, values, MODEL, mean, Neighbourhood(16, 150.0), units="metre")
    expected = local_leave_one_out(meuse.xy, values, MODEL, mean, neighbours=16, search_radius=150.0)
    np.testing.assert_array_equal(result.residual, expected.residual)
    unresolved = int(np.count_nonzero(~expected.resolved_rows))
    assert 0 < unresolved < len(values)  # a 150 m search leaves some Meuse samples with fewer than 2 others
    assert lines[0] == choice.LogLine("info", "Local leave-one-out: each sample from its 16 nearest other samples "
                                              "within 150 metre (along the major axis of the model's anisotropy).")
    assert lines[1].level == "warning" and lines[1].text.startswith(f"{unresolved:,} sample(s) have too few")


def test_cross_validation_refuses_a_radius_that_leaves_every_sample_out(meuse):
    mean = MeanModel.for_data("constant", meuse.xy)
    with pytest.raises(FieldcastError, match="No sample has enough other samples within SEARCH_RADIUS"):
        cross_validate_with(meuse.xy, np.log(meuse.zinc), MODEL, mean, Neighbourhood(16, 1.0))


def test_cross_validation_above_the_global_limit_goes_local(meuse, monkeypatch):
    monkeypatch.setattr(choice, "GLOBAL_SAMPLE_LIMIT", 100)  # Meuse's 155 samples stand in for > 5,000
    mean = MeanModel.for_data("constant", meuse.xy)
    values = np.log(meuse.zinc)
    result, lines = cross_validate_with(meuse.xy, values, MODEL, mean, Neighbourhood())
    expected = local_leave_one_out(meuse.xy, values, MODEL, mean, neighbours=choice.AUTOMATIC_NEIGHBOURS)
    np.testing.assert_array_equal(result.residual, expected.residual)
    assert "each sample uses its 64 nearest samples instead" in lines[0].text
    assert lines[1].text.startswith("Local leave-one-out: each sample from its 64 nearest other samples")
