"""Areas in words (algorithms/io/area_words.py). Conversions: 1 ha = 10^4 m², 1 km² = 10^6 m² (SI)."""
from __future__ import annotations

import pytest

from fieldcast.algorithms.io.area_words import area_words


@pytest.mark.parametrize(("area", "words"), [
    (1.12912e6, "112.9 ha"),          # the simulate log once read "1.12912e+06 square metres"
    (5000.0, "5,000 m²"),
    (10000.0, "1 ha"),
    (2.5e9, "2,500 km²"),
    (1.0e8, "100 km²"),
])
def test_metre_areas_read_in_square_metres_hectares_or_square_kilometres(area, words):
    assert area_words(area, "metre") == words


def test_other_units_keep_their_own_square_units():
    assert area_words(12400.0, "US survey foot") == "12,400 square US survey foot units"
