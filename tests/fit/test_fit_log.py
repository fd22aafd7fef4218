"""The fit in words for the log (algorithms/fit/fit_log.py), on the published Meuse data.

Data: Meuse topsoil zinc (Rikken & Van Rijn 1993; tests/data/README.md), modelled as ln(zinc).
"""
from __future__ import annotations

import math
import re

import numpy as np
import pytest

from fieldcast.algorithms.fit.fit_log import fit_log_lines, model_words
from fieldcast.algorithms.fit.fitting import fit_model
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure


@pytest.fixture(scope="module")
def auto_fit(meuse):
    return fit_model(meuse.xy, np.log(meuse.zinc), kernel="auto", anisotropy=False)


def test_every_candidate_is_listed_with_its_aic_and_the_difference_from_the_lowest(auto_fit):
    lines = fit_log_lines(auto_fit, "m")
    rows = [line for line in lines if line.startswith("  ")]
    assert len(rows) == len(auto_fit.candidates) == 5
    lowest = min(c.aic for c in auto_fit.candidates)
    for row, candidate in zip(rows, auto_fit.candidates):
        aic, delta = (float(v) for v in re.search(r"AIC (\S+), ΔAIC (\S+?)(?: |$)", row).groups())
        assert row.startswith(f"  {candidate.family}, isotropic")
        assert aic == pytest.approx(candidate.aic, abs=0.005)
        # ΔAIC_i = AIC_i - min AIC (Burnham & Anderson 2002).
        assert delta == pytest.approx(candidate.aic - lowest, abs=0.006)
    assert sum("(chosen)" in row for row in rows) == 1
    chosen = next(row for row in rows if "(chosen)" in row)
    assert chosen.startswith(f"  {auto_fit.covariance.structures[0].family},")


def test_the_chosen_model_is_named_with_family_anisotropy_and_effective_range(auto_fit):
    first = fit_log_lines(auto_fit, "m")[0]
    structure = auto_fit.covariance.structures[0]
    assert first.startswith(f"Chosen model: {structure.family}, isotropic, effective range "
                            f"{structure.effective_range:.4g} m")
    assert "constant mean; REML fit" in first


def test_an_anisotropic_model_gives_both_effective_ranges():
    # Exponential practical range: correlation exp(-r) = 0.05 at r = ln 20.
    model = CovarianceModel((Structure("exponential", 1.0, 100.0, 30.0, 0.5),), 0.1)
    words = model_words(model, "m")
    assert f"effective range {100 * math.log(20):.4g} m along the major axis" in words
    assert f"{50 * math.log(20):.4g} m across it" in words and "azimuth 30°" in words


def test_reml_logs_say_trends_are_compared_by_ml_aic_or_leave_one_out(meuse, auto_fit):
    assert any("METHOD ml" in line and "different trends" in line for line in fit_log_lines(auto_fit, "m"))
    ml = fit_model(meuse.xy, np.log(meuse.zinc), kernel="exponential", anisotropy=False, method="ml")
    assert not any("different trends" in line for line in fit_log_lines(ml, "m"))


def test_coefficient_line_gives_each_term_with_its_standard_error():
    from fieldcast.algorithms import coefficient_line

    line = coefficient_line(("1", "dist", "ffreq=2"), [6.5, -2.125, -0.5], [0.1, 0.25, 0.125])
    assert line == ("Mean coefficients (generalised least squares; ± standard error given the covariance): "
                    "1 = 6.5 ± 0.1, dist = -2.125 ± 0.25, ffreq=2 = -0.5 ± 0.125.")
    assert coefficient_line(("1",), [6.5], []) == "Mean coefficients (generalised least squares): 1 = 6.5."
    assert coefficient_line((), [], []) == "The mean is known: no coefficients were estimated."
