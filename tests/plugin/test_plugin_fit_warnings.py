"""Warnings of a toolbox fit in the working CRS's words: distances in its units, samples outside its area of use,
samples wider than one UTM zone, and no spatial structure resolved.

Samples: the published Meuse topsoil data (Rikken & Van Rijn 1993; tests/data/README.md), EPSG:28992 metres.
The wide and white-noise layers are simulation studies: invented locations and values, labelled where made.
The algorithms run in-process through ``processing.run``.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures
from test_plugin_few_samples import WarningFeedback

QUICK = {"KERNEL": "exponential", "ANISOTROPY": False, "TREND": "constant", "METHOD": "reml"}


def fit_warnings(qgis_processing, layer, folder: Path, field: str, **parameters) -> list[str]:  # noqa: F811
    """Run 'Fit covariance model' with :data:`QUICK` settings; return the warnings it logged."""
    feedback = WarningFeedback()
    outputs = qgis_processing.run("fieldcast:fitmodel", {"INPUT": layer, "FIELD": field, **QUICK, **parameters,
                                                         "OUTPUT_MODEL": str(folder / "model.json")},
                                  feedback=feedback)
    assert Path(outputs["OUTPUT_MODEL"]).is_file() and not feedback.errors
    return feedback.warnings


def test_a_meuse_range_on_its_bound_is_said_in_metres(qgis_processing, meuse, tmp_path):  # noqa: F811
    # Untransformed zinc with a constant mean keeps growing in variance over the study area, so the exponential
    # range runs to its upper bound, 5 times the largest sample distance (algorithms/model/parameters.py).
    warnings = fit_warnings(qgis_processing, point_layer(meuse.xy, {"zinc": meuse.zinc}), tmp_path, "zinc")
    (bound,) = [w for w in warnings if w.startswith("The range hit its upper bound")]
    assert " metre, 5 times the largest distance between samples" in bound
    assert not any("coordinate units" in w for w in warnings)


def test_samples_outside_the_target_crs_area_of_use_are_warned_about(qgis_processing, meuse, tmp_path):  # noqa: F811
    # EPSG:32633 (WGS 84 / UTM zone 33N) is defined from 12 to 18 degrees east (EPSG registry); the Meuse samples
    # lie near 5.7 degrees east.
    warnings = fit_warnings(qgis_processing, point_layer(meuse.xy, {"zinc": np.log(meuse.zinc)}), tmp_path, "zinc",
                            TARGET_CRS="EPSG:32633")
    assert any(w.startswith("155 of 155 samples lie outside the area of use") for w in warnings)


def test_a_geographic_layer_wider_than_one_utm_zone_is_warned_about(qgis_processing, tmp_path):  # noqa: F811
    # Simulation study: a 6 x 6 grid from 2 to 9.5 degrees east (7.5 degrees, more than a 6-degree UTM zone) and
    # 50 to 51 degrees north, with independent standard normal values.
    lonlat = np.array([(lon, lat) for lon in np.linspace(2.0, 9.5, 6) for lat in np.linspace(50.0, 51.0, 6)])
    values = np.random.default_rng(0).standard_normal(len(lonlat))
    warnings = fit_warnings(qgis_processing, point_layer(lonlat, {"v": values}, crs="EPSG:4326"), tmp_path, "v")
    assert any("span 7.5 degrees of longitude, more than one UTM zone" in w for w in warnings)


def test_white_noise_in_a_toolbox_run_resolves_no_structure_in_metres(qgis_processing, tmp_path):  # noqa: F811
    # Simulation study: independent standard normal values (seed 1) on a regular 10 x 10 grid with 70 m spacing;
    # no structure exists at any scale, and this draw's exponential fit puts its effective range below 70 m.
    steps = np.arange(10) * 70.0
    grid = np.array([178000.0, 330000.0]) + np.array([(x, y) for x in steps for y in steps])
    values = np.random.default_rng(1).standard_normal(len(grid))
    warnings = fit_warnings(qgis_processing, point_layer(grid, {"v": values}), tmp_path, "v")
    (unresolved,) = [w for w in warnings if "resolve no spatial structure" in w]
    assert "metre (effective range)" in unresolved and "(70 metre, the median distance" in unresolved
