"""Inputs that used to fail late or silently: each gets a message naming the cause and the parameter to change.

Samples are the published Meuse data (tests/data/README.md) in EPSG:28992, changed where a test needs a
particular defect. Every refusal is checked through ``processing.run``: the message, no output file left and
the inputs unchanged (the ``run_refused`` fixture).
"""
from __future__ import annotations

import numpy as np

from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures
from test_plugin_bad_inputs import (  # noqa: F401 - meuse_layer, model_file and run_refused are fixtures
    QUICK_FIT,
    meuse_layer,
    model_file,
    run_logged,
    run_refused,
)

# --- sample values -------------------------------------------------------------------------------------------

def test_values_whose_squares_overflow_are_refused_with_advice(run_refused, meuse):  # noqa: F811
    zinc = np.array(meuse.zinc) * 1e297  # near 1e300, as in a field stored in the wrong units
    layer = point_layer(meuse.xy, {"zinc": zinc})
    run_refused("fieldcast:fitmodel", {"INPUT": layer, "FIELD": "zinc", **QUICK_FIT},
                "155 sample value(s) are beyond \u00b11e+50", "Rescale the field to larger units")


def test_fifty_thousand_samples_at_one_location_are_averaged(qgis_processing, meuse, tmp_path):  # noqa: F811
    xy = np.vstack([meuse.xy, np.repeat(meuse.xy[:1], 50_000, axis=0)])
    zinc = np.concatenate([meuse.zinc, np.full(50_000, 500.0)])
    layer = point_layer(xy, {"zinc": zinc})
    _, log = run_logged(qgis_processing, "fieldcast:fitmodel", {
        "INPUT": layer, "FIELD": "zinc", **QUICK_FIT, "OUTPUT_MODEL": str(tmp_path / "m.json")})
    assert "Averaged 50001 samples at 1 shared locations" in log and "Using 155 samples" in log
