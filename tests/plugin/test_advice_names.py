"""Advice in messages names parameters that exist.

Every sentence in a string literal of algorithms/ and plugin/ (docstrings excepted) is scanned for
upper-case names such as ``TREND`` or ``SEARCH_RADIUS``; each must be a parameter or output of some
toolbox algorithm, or one of the abbreviations listed below.
"""
from __future__ import annotations

import ast
import re
from pathlib import Path

from qgis.core import QgsApplication

from qgis_support import fieldcast_plugin  # noqa: F401 - fixture
from repo_package import REPO_ROOT

NAME = re.compile(r"(?<![\w.'\"-])([A-Z][A-Z0-9]{2,}(?:_[A-Z0-9]+)*)(?!\w)")
"""An upper-case word of three or more characters, possibly joined by underscores."""

ABBREVIATIONS = {"AIC", "BIC", "BFGS", "CRS", "EPSG", "FFT", "GDAL", "HTML", "JSON", "MSDR", "NULL", "QGIS", "SIGTERM",
                 "REML", "RMSE", "UTM", "VRT", "P10", "P50", "P90"}
"""Upper-case words of messages that are abbreviations, not parameter names."""


def is_sentence(text: str) -> bool:
    return text.count(" ") >= 3


def message_strings(path: Path) -> list[str]:
    """String literals of a module that read as sentences, docstrings left out."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    docstrings = {id(node.value) for node in ast.walk(tree)
                  if isinstance(node, ast.Expr) and isinstance(node.value, ast.Constant)}
    return [node.value for node in ast.walk(tree)
            if isinstance(node, ast.Constant) and isinstance(node.value, str) and id(node) not in docstrings
            and is_sentence(node.value)]


def mentioned_names() -> dict[str, set[str]]:
    """Upper-case names in the message strings, with the files that mention them."""
    found: dict[str, set[str]] = {}
    for folder in ("algorithms", "plugin"):
        for path in sorted((REPO_ROOT / folder).rglob("*.py")):
            for text in message_strings(path):
                for name in NAME.findall(text):
                    found.setdefault(name, set()).add(str(path.relative_to(REPO_ROOT)))
    return found


def toolbox_names() -> set[str]:
    provider = QgsApplication.processingRegistry().providerById("fieldcast")
    names = set()
    for algorithm in provider.algorithms():
        names |= {p.name() for p in algorithm.parameterDefinitions()}
        names |= {o.name() for o in algorithm.outputDefinitions()}
    return names


def test_the_scan_finds_the_parameter_names_that_messages_give_as_advice(fieldcast_plugin):  # noqa: F811
    found = mentioned_names()
    assert {"TREND", "ANISOTROPY", "KERNEL", "METHOD", "SEARCH_RADIUS", "NEIGHBOURS"} <= set(found)


def test_every_upper_case_name_in_a_message_is_a_parameter_or_output_of_some_algorithm(fieldcast_plugin):  # noqa: F811
    known = toolbox_names() | ABBREVIATIONS
    unknown = {name: sorted(files) for name, files in mentioned_names().items() if name not in known}
    assert unknown == {}


ENGINE_ONLY_ADVICE = ("nested off", "turn nested", "use a model with a nugget", "fewer structures",
                      "choose method '", "merge duplicates")
"""Advice that names engine arguments or model edits the toolbox does not offer (the toolbox fits one structure,
estimates the nugget itself and takes METHOD in upper case)."""


def test_no_message_gives_advice_only_an_engine_caller_could_follow():
    found = {phrase: sorted({str(path.relative_to(REPO_ROOT)) for folder in ("algorithms", "plugin")
                             for path in (REPO_ROOT / folder).rglob("*.py")
                             for text in message_strings(path) if phrase in text.lower()})
             for phrase in ENGINE_ONLY_ADVICE}
    assert {phrase: files for phrase, files in found.items() if files} == {}
