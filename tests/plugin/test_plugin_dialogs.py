"""What the toolbox dialogs show: the main page without expert parameters, the value field, search words and help."""
from __future__ import annotations

import pytest
from qgis.core import QgsApplication, QgsProcessingDestinationParameter, QgsProcessingParameterDefinition

from qgis_support import fieldcast_plugin, qgis_processing  # noqa: F401 - fixtures

MAIN_PAGE_INPUTS = {
    "fitmodel": {"INPUT", "FIELD", "TRANSFORM", "KERNEL", "ANISOTROPY", "TREND", "METHOD"},
    "predict": {"INPUT", "FIELD", "MODEL", "EXTENT", "PIXEL_SIZE", "MASK", "THRESHOLD"},
    "predictmany": {"INPUT", "FIELDS", "TRANSFORM", "KERNEL", "ANISOTROPY", "TREND", "METHOD", "SHARED_MODEL",
                    "EXTENT", "PIXEL_SIZE", "MASK"},
    "simulate": {"INPUT", "FIELD", "MODEL", "EXTENT", "PIXEL_SIZE", "MASK", "REALIZATIONS", "THRESHOLD"},
    "crossvalidate": {"INPUT", "FIELD", "MODEL"},
}
EXPERT = {"NEIGHBOURS", "SEARCH_RADIUS", "SUPPORT", "BACKTRANSFORM", "TARGET_CRS", "LOG_OFFSET", "SEED"}


def algorithm(name: str):
    return QgsApplication.processingRegistry().algorithmById(f"fieldcast:{name}")


def is_advanced(definition: QgsProcessingParameterDefinition) -> bool:
    return bool(definition.flags() & QgsProcessingParameterDefinition.FlagAdvanced)


@pytest.mark.parametrize("name", sorted(MAIN_PAGE_INPUTS))
def test_main_page_shows_only_the_everyday_inputs(fieldcast_plugin, name):  # noqa: F811
    # Outputs are left out of the count: they sit in the dialog's own output section.
    inputs = [d for d in algorithm(name).parameterDefinitions()
              if not isinstance(d, QgsProcessingDestinationParameter)]
    assert {d.name() for d in inputs if not is_advanced(d)} == MAIN_PAGE_INPUTS[name]
    assert all(is_advanced(d) for d in inputs if d.name() in EXPERT)
