"""Plugin bootstrap: metadata, provider registration, the public parameter contract, help and icons."""
from __future__ import annotations

import configparser
import xml.etree.ElementTree as ElementTree

import pytest
from qgis.core import QgsApplication, QgsProcessingParameterEnum
from qgis.PyQt.QtSvg import QSvgRenderer

from fieldcast.algorithms.version import __version__
from qgis_support import fieldcast_plugin, qgis_processing  # noqa: F401 - fixtures
from repo_package import REPO_ROOT

CONTRACT = {
    "fitmodel": ("Fit covariance model",
                 {"NUGGET", "ERROR_VARIANCE_FIELD", "BELOW_LIMIT_FIELD", "NONDETECTS", "SUBSTITUTION_FACTOR",
                  "INPUT", "FIELD", "COVARIATES", "CLASS_COVARIATES", "TRANSFORM", "LOG_OFFSET", "KERNEL",
                  "BOXCOX_LAMBDA", "LIKELIHOOD_NEIGHBOURS", "ANISOTROPY", "TREND", "METHOD", "TARGET_CRS",
                  "OUTPUT_MODEL", "OUTPUT_REPORT"},
                 {"OUTPUT_MODEL", "OUTPUT_REPORT", "FAMILY", "PARTIAL_SILL", "RANGE", "EFFECTIVE_RANGE",
                  "NUGGET", "AZIMUTH", "RATIO", "LOG_LIKELIHOOD", "AIC"}),
    "predict": ("Predict surface",
                {"NUGGET", "ERROR_VARIANCE_FIELD", "PREDICT_TARGET", "LOCAL_MEAN",
                 "BELOW_LIMIT_FIELD", "NONDETECTS", "SUBSTITUTION_FACTOR",
                 "INPUT", "FIELD", "MODEL", "COVARIATES", "CLASS_COVARIATES", "TEMPLATE", "EXTENT", "PIXEL_SIZE",
                 "MASK", "TEMPLATE_NODATA_MASK", "MAP_AREA", "HULL_MARGIN", "BACKTRANSFORM",
                 "SUPPORT", "NEIGHBOURS", "SEARCH_RADIUS", "THRESHOLD", "INTERVAL_PROBABILITY", "TARGET_CRS", "OUTPUT",
                 "OUTPUT_VARIANCE", "OUTPUT_SD", "OUTPUT_LOWER", "OUTPUT_UPPER", "OUTPUT_EXCEEDANCE",
                 "OUTPUT_DISTANCE"},
                {"OUTPUT", "OUTPUT_VARIANCE", "OUTPUT_SD", "OUTPUT_LOWER", "OUTPUT_UPPER", "OUTPUT_EXCEEDANCE",
                 "OUTPUT_DISTANCE"}),
    "predictmany": ("Predict surfaces for several fields",
                    {"NUGGET", "ERROR_VARIANCE_FIELD", "PREDICT_TARGET", "LOCAL_MEAN",
                     "BELOW_LIMIT_FIELD", "NONDETECTS", "SUBSTITUTION_FACTOR",
                     "INPUT", "FIELDS", "COVARIATES", "CLASS_COVARIATES", "TRANSFORM", "LOG_OFFSET", "KERNEL",
                     "BOXCOX_LAMBDA", "LIKELIHOOD_NEIGHBOURS", "ANISOTROPY", "TREND", "METHOD",
                     "SHARED_MODEL", "TEMPLATE", "EXTENT", "PIXEL_SIZE", "MASK", "TEMPLATE_NODATA_MASK", "MAP_AREA",
                     "HULL_MARGIN", "BACKTRANSFORM",
                     "NEIGHBOURS", "SEARCH_RADIUS", "TARGET_CRS", "OUTPUT_FOLDER"},
                    {"OUTPUT_FOLDER", "COUNT"}),
    "predictpoints": ("Predict at points",
                      {"NUGGET", "ERROR_VARIANCE_FIELD", "PREDICT_TARGET", "LOCAL_MEAN",
                       "BELOW_LIMIT_FIELD", "NONDETECTS", "SUBSTITUTION_FACTOR",
                       "INPUT", "FIELD", "MODEL", "COVARIATES", "CLASS_COVARIATES", "TARGETS", "THRESHOLD",
                       "BACKTRANSFORM", "NEIGHBOURS", "SEARCH_RADIUS", "TARGET_CRS", "OUTPUT"},
                      {"OUTPUT"}),
    "assessareas": ("Assess areas",
                    {"INPUT", "FIELD", "MODEL", "COVARIATES", "CLASS_COVARIATES", "AREAS", "THRESHOLD", "REALIZATIONS",
                     "SEED", "DEPTH_FIELD", "DEPTH", "TARGET_CRS", "OUTPUT",
                     "NUGGET", "ERROR_VARIANCE_FIELD", "BELOW_LIMIT_FIELD", "NONDETECTS", "SUBSTITUTION_FACTOR"},
                    {"OUTPUT"}),
    "simulate": ("Simulate conditional fields",
                 {"NUGGET", "ERROR_VARIANCE_FIELD", "BELOW_LIMIT_FIELD", "NONDETECTS", "SUBSTITUTION_FACTOR",
                  "INPUT", "FIELD", "MODEL", "COVARIATES", "CLASS_COVARIATES", "TEMPLATE", "EXTENT", "PIXEL_SIZE",
                  "MASK", "TEMPLATE_NODATA_MASK",
                  "REALIZATIONS", "SEED", "NEIGHBOURS",
                  "SEARCH_RADIUS", "LOCAL_MEAN", "THRESHOLD", "TARGET_CRS", "OUTPUT", "OUTPUT_MEAN", "OUTPUT_STDDEV",
                  "OUTPUT_EXCEEDANCE", "OUTPUT_P10", "OUTPUT_P90", "OUTPUT_TABLE", "AREAS", "DEPTH", "OUTPUT_AREAS"},
                 {"OUTPUT", "OUTPUT_MEAN", "OUTPUT_STDDEV", "OUTPUT_EXCEEDANCE", "OUTPUT_P10", "OUTPUT_P90",
                  "OUTPUT_TABLE", "AREA_P10", "AREA_P50", "AREA_P90", "OUTPUT_AREAS"}),
    "proposesamples": ("Propose new samples",
                       {"INPUT", "FIELD", "MODEL", "COVARIATES", "CLASS_COVARIATES", "REGION", "COUNT", "CANDIDATES",
                        "MIN_SPACING", "CRITERION", "THRESHOLD", "TARGET_CRS", "OUTPUT"},
                       {"OUTPUT"}),
    "crossvalidate": ("Cross-validate model",
                      {"NUGGET", "ERROR_VARIANCE_FIELD", "LOCAL_MEAN",
                       "BELOW_LIMIT_FIELD", "NONDETECTS", "SUBSTITUTION_FACTOR",
                       "INPUT", "FIELD", "MODEL", "COVARIATES", "CLASS_COVARIATES", "NEIGHBOURS", "SEARCH_RADIUS",
                       "TARGET_CRS", "OUTPUT", "OUTPUT_REPORT"},
                      {"OUTPUT", "OUTPUT_REPORT", "ME", "RMSE", "MSDR", "COVERAGE95", "ME_ATTRIBUTE",
                       "RMSE_ATTRIBUTE"}),
}
CHOICES = {
    ("fitmodel", "TRANSFORM"): ["none", "log", "boxcox", "normalscore"],
    ("fitmodel", "KERNEL"): ["auto", "exponential", "spherical", "gaussian", "matern32", "matern52", "matern"],
    ("fitmodel", "TREND"): ["constant", "linear", "quadratic"],
    ("fitmodel", "METHOD"): ["reml", "ml", "wls"],
    ("predict", "BACKTRANSFORM"): ["median", "mean"],
    ("predict", "SUPPORT"): ["point", "cell", "cell_log"],
    ("predict", "MAP_AREA"): ["hull", "extent"],
    ("predictmany", "MAP_AREA"): ["hull", "extent"],
    ("predictmany", "TRANSFORM"): ["none", "log", "boxcox", "normalscore"],
    ("predictmany", "KERNEL"): ["auto", "exponential", "spherical", "gaussian", "matern32", "matern52", "matern"],
    ("predictmany", "TREND"): ["constant", "linear", "quadratic"],
    ("predictmany", "METHOD"): ["reml", "ml", "wls"],
    ("predictmany", "BACKTRANSFORM"): ["median", "mean"],
    ("predictpoints", "BACKTRANSFORM"): ["median", "mean"],
    ("proposesamples", "CRITERION"): ["variance", "classification"],
}


def metadata() -> configparser.SectionProxy:
    # QGIS reads metadata.txt with configparser (interpolation on), so a stray '%' would break it.
    parser = configparser.ConfigParser()
    parser.read(REPO_ROOT / "metadata.txt", encoding="utf-8")
    return parser["general"]


def test_metadata_declares_a_processing_plugin_of_this_version():
    general = metadata()
    assert general["name"] == "Fieldcast"
    assert general["version"] == __version__
    assert general["qgisMinimumVersion"] == "3.22"
    assert general["hasProcessingProvider"] == "yes"
    assert general["license"] == "GPL-2.0-or-later"
    assert "kriging" in general["description"].lower() and "licensed professional" in general["about"]
    assert (REPO_ROOT / general["icon"]).is_file()
    # Categories documented for plugin metadata.txt in the QGIS Python plugin guide (from memory).
    assert general.get("category", "Raster") in {"Raster", "Vector", "Database", "Mesh", "Web"}
    assert "example.org" not in (REPO_ROOT / "metadata.txt").read_text(encoding="utf-8")


def test_metadata_names_every_algorithm_in_about_and_changelog():
    general = metadata()
    for display, _, _ in CONTRACT.values():
        assert f'"{display}"' in general["about"] and display in general["changelog"], display


def test_class_factory_registers_the_provider_with_eight_algorithms(fieldcast_plugin):  # noqa: F811
    provider = QgsApplication.processingRegistry().providerById("fieldcast")
    assert provider is not None and provider.name() == "Fieldcast"
    assert sorted(a.name() for a in provider.algorithms()) == sorted(CONTRACT)
    assert QSvgRenderer(provider.svgIconPath()).isValid()


def test_unload_removes_the_provider(fieldcast_plugin):  # noqa: F811
    registry = QgsApplication.processingRegistry()
    fieldcast_plugin.unload()
    assert registry.providerById("fieldcast") is None
    fieldcast_plugin.initProcessing()
    assert registry.providerById("fieldcast") is not None


@pytest.mark.parametrize("name", sorted(CONTRACT))
def test_parameters_and_outputs_are_the_public_contract(fieldcast_plugin, name):  # noqa: F811
    algorithm = QgsApplication.processingRegistry().algorithmById(f"fieldcast:{name}")
    display, parameters, outputs = CONTRACT[name]
    assert algorithm.displayName() == display
    assert {p.name() for p in algorithm.parameterDefinitions()} == parameters
    assert {o.name() for o in algorithm.outputDefinitions()} == outputs
    help_text = algorithm.shortHelpString()
    for caution in ("covariance model", "stationary", "variance together with the prediction",
                    "local regulations", "licensed professional judgement"):
        assert caution in help_text
    root = ElementTree.parse(algorithm.svgIconPath()).getroot()
    assert root.tag.endswith("svg") and QSvgRenderer(algorithm.svgIconPath()).isValid()


@pytest.mark.parametrize("key", sorted(CHOICES))
def test_choices_take_the_words_as_values(fieldcast_plugin, key):  # noqa: F811
    name, parameter = key
    definition = QgsApplication.processingRegistry().algorithmById(f"fieldcast:{name}").parameterDefinition(parameter)
    assert isinstance(definition, QgsProcessingParameterEnum)
    assert definition.usesStaticStrings() and definition.options() == CHOICES[key]
    assert definition.defaultValue() == CHOICES[key][0]


def test_predict_dialog_writes_variance_and_standard_error_by_default(fieldcast_plugin):  # noqa: F811
    algorithm = QgsApplication.processingRegistry().algorithmById("fieldcast:predict")
    created = {name: algorithm.parameterDefinition(name).createByDefault()
               for name in ("OUTPUT_VARIANCE", "OUTPUT_SD", "OUTPUT_LOWER", "OUTPUT_UPPER", "OUTPUT_EXCEEDANCE")}
    assert created == {"OUTPUT_VARIANCE": True, "OUTPUT_SD": True, "OUTPUT_LOWER": False, "OUTPUT_UPPER": False,
                       "OUTPUT_EXCEEDANCE": False}
    assert algorithm.parameterDefinition("INTERVAL_PROBABILITY").defaultValue() == 0.9
