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
