"""What the toolbox dialogs show: the main page without expert parameters, the value field, search words and help."""
from __future__ import annotations

import json
import subprocess
import sys
from html import unescape
from pathlib import Path

import numpy as np
import pytest
from qgis.core import (
    QgsApplication,
    QgsProcessingDestinationParameter,
    QgsProcessingException,
    QgsProcessingParameterDefinition,
)
from qgis.gui import QgsProcessingToolboxModel, QgsProcessingToolboxProxyModel
from qgis.PyQt.QtCore import QModelIndex, QUrl

from qgis_process_support import write_point_geopackage
from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures
from repo_package import REPO_ROOT

MAIN_PAGE_INPUTS = {
    "fitmodel": {"INPUT", "FIELD", "COVARIATES", "CLASS_COVARIATES", "TRANSFORM", "KERNEL", "ANISOTROPY", "TREND",
                 "METHOD"},
    "predict": {"INPUT", "FIELD", "MODEL", "COVARIATES", "CLASS_COVARIATES", "TEMPLATE", "EXTENT", "PIXEL_SIZE",
                "MASK", "MAP_AREA", "THRESHOLD"},
    "predictmany": {"INPUT", "FIELDS", "COVARIATES", "CLASS_COVARIATES", "TRANSFORM", "KERNEL", "ANISOTROPY",
                    "TREND", "METHOD", "SHARED_MODEL", "TEMPLATE", "EXTENT", "PIXEL_SIZE", "MASK", "MAP_AREA"},
    "simulate": {"INPUT", "FIELD", "MODEL", "COVARIATES", "CLASS_COVARIATES", "TEMPLATE", "EXTENT", "PIXEL_SIZE",
                 "MASK", "REALIZATIONS", "THRESHOLD"},
    "crossvalidate": {"INPUT", "FIELD", "MODEL", "COVARIATES", "CLASS_COVARIATES"},
    "predictpoints": {"INPUT", "FIELD", "MODEL", "COVARIATES", "CLASS_COVARIATES", "TARGETS", "THRESHOLD"},
    "proposesamples": {"INPUT", "FIELD", "MODEL", "COVARIATES", "CLASS_COVARIATES", "REGION", "COUNT", "CANDIDATES",
                       "MIN_SPACING", "CRITERION", "THRESHOLD"},
    "assessareas": {"INPUT", "FIELD", "MODEL", "COVARIATES", "CLASS_COVARIATES", "AREAS", "THRESHOLD", "REALIZATIONS",
                    "DEPTH_FIELD", "DEPTH"},
}
EXPERT = {"NEIGHBOURS", "SEARCH_RADIUS", "SUPPORT", "BACKTRANSFORM", "TARGET_CRS", "LOG_OFFSET", "SEED", "HULL_MARGIN",
          "INTERVAL_PROBABILITY", "TEMPLATE_NODATA_MASK", "NUGGET", "ERROR_VARIANCE_FIELD", "PREDICT_TARGET",
          "BOXCOX_LAMBDA",
          "BELOW_LIMIT_FIELD", "NONDETECTS", "SUBSTITUTION_FACTOR", "LOCAL_MEAN",
          "LIKELIHOOD_NEIGHBOURS"}


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


def geopackage_with_fid(path: Path) -> str:
    """A GeoPackage point layer with its feature id ``fid``, a text label and a numeric ``zinc``."""
    xy = [(181000.0 + index, 333000.0 + index) for index in range(3)]
    return write_point_geopackage(path, "samples", xy, {"label": [f"s{index}" for index in range(3)],
                                                        "zinc": [100.0 * (index + 1) for index in range(3)]})


def test_value_field_widget_does_not_preselect_the_feature_id(tmp_path):
    names = ["fitmodel", "predict", "simulate", "crossvalidate", "predictpoints"]
    result = subprocess.run([sys.executable, str(Path(__file__).with_name("field_widget_choice.py")),
                             str(geopackage_with_fid(tmp_path / "samples.gpkg")), *names],
                            capture_output=True, text=True, timeout=120, check=True)
    assert json.loads(result.stdout.strip().splitlines()[-1]) == dict.fromkeys(names)


@pytest.mark.parametrize("name", ["fitmodel", "predict", "predictpoints", "simulate", "crossvalidate"])
def test_run_without_value_field_is_refused_with_advice(qgis_processing, tmp_path, name):  # noqa: F811
    layer = point_layer(np.array([[0.0, 0.0], [10.0, 0.0], [0.0, 10.0]]), {"zinc": np.array([1.0, 2.0, 3.0])})
    with pytest.raises(QgsProcessingException, match=r"No value field chosen.*'Value field' \(FIELD\)"):
        qgis_processing.run(f"fieldcast:{name}", {"INPUT": layer, "OUTPUT": str(tmp_path / "out.tif")})
    assert list(tmp_path.iterdir()) == []


def toolbox_search(words: str) -> set[str]:
    """Ids of the algorithms the Processing toolbox lists for the search ``words``."""
    model = QgsProcessingToolboxProxyModel(None, QgsApplication.processingRegistry())
    model.setFilterString(words)

    def found(parent: QModelIndex) -> set[str]:
        ids = set()
        for row in range(model.rowCount(parent)):
            index = model.index(row, 0, parent)
            ids |= {model.data(index, QgsProcessingToolboxModel.RoleAlgorithmId)} | found(index)
        return ids

    return found(QModelIndex()) - {None}


@pytest.mark.parametrize("words", ["interpolation", "kriging", "geostatistics", "gaussian process"])
def test_toolbox_search_finds_every_algorithm(fieldcast_plugin, words):  # noqa: F811
    assert {f"fieldcast:{name}" for name in MAIN_PAGE_INPUTS} <= toolbox_search(words)


def test_toolbox_search_finds_the_algorithm_for_its_own_words(fieldcast_plugin):  # noqa: F811
    assert "fieldcast:fitmodel" in toolbox_search("variogram")
    assert "fieldcast:crossvalidate" in toolbox_search("leave-one-out")
    assert "fieldcast:simulate" in toolbox_search("conditional simulation")
    assert "fieldcast:predictpoints" in toolbox_search("wells")
    assert "fieldcast:predict" not in toolbox_search("leave-one-out")


@pytest.mark.parametrize("name", sorted(MAIN_PAGE_INPUTS))
def test_help_url_opens_the_readme_section_shipped_with_the_plugin(fieldcast_plugin, name):  # noqa: F811
    url = QUrl(algorithm(name).helpUrl())
    assert url.isLocalFile() and Path(url.toLocalFile()) == REPO_ROOT / "README.md"
    heading = f"### `fieldcast:{name}` — {algorithm(name).displayName()}"
    assert heading in (REPO_ROOT / "README.md").read_text(encoding="utf-8").splitlines()
    # GitHub-style anchor of that heading: lower case, punctuation dropped, spaces to hyphens (common practice).
    assert url.fragment() == f"fieldcast{name}--{algorithm(name).displayName().lower().replace(' ', '-')}"


@pytest.mark.parametrize("name", sorted(MAIN_PAGE_INPUTS))
def test_every_parameter_has_its_help_and_the_algorithm_a_short_description(fieldcast_plugin, name):  # noqa: F811
    tool = algorithm(name)
    assert 20 < len(tool.shortDescription()) < 120
    for definition in tool.parameterDefinitions():
        assert definition.help() and definition.help() in unescape(tool.shortHelpString()), definition.name()


def test_parameter_help_is_the_entry_of_that_parameter(fieldcast_plugin):  # noqa: F811
    assert "skewed positive data" in algorithm("fitmodel").parameterDefinition("TRANSFORM").help()
    assert "local kriging" in algorithm("predict").parameterDefinition("NEIGHBOURS").help()
    assert "How many fields to draw" in algorithm("simulate").parameterDefinition("REALIZATIONS").help()
    assert "Multiband" in algorithm("simulate").parameterDefinition("OUTPUT").help()
