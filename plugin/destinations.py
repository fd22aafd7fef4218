"""The files a run reads and writes, found before any work so that no output overwrites an input or another output.

:func:`refuse_clashes` compares paths by ``os.path.realpath`` (and ``os.path.samefile`` when both exist).
Temporary and memory outputs never clash: they are not files the user chose.
"""
from __future__ import annotations

import os
import re
from collections.abc import Iterable

from qgis.core import (
    QgsDataSourceUri,
    QgsMapLayer,
    QgsProcessingFeatureSourceDefinition,
    QgsProcessingOutputLayerDefinition,
)

from ..algorithms import FieldcastError

TEMPORARY_PREFIXES = ("TEMPORARY_OUTPUT", "memory:")
PROVIDER_PREFIX = re.compile(r"(?P<provider>[A-Za-z]{3,}):(?P<uri>.*)", re.DOTALL)
"""``provider:uri`` (three letters at least, so that a Windows drive ``C:`` is not taken for one)."""
FILE_PROVIDERS = ("ogr", "spatialite")
DBNAME = re.compile(r"(^|\s)dbname=")


def file_part(source: str) -> str:
    """The file of a data source string, "" for memory and for databases that are not files.

    Understood: plain paths with ``|layername=...`` style suffixes, a ``provider:`` prefix of a file-based
    provider (``ogr:``, ``spatialite:``), and ``dbname='...' table=...`` URIs (Processing's
    ``ogr:dbname=... table=...`` destinations), read with QGIS's own URI parser.
    """
    if not source or source.startswith(TEMPORARY_PREFIXES):
        return ""
    prefixed = PROVIDER_PREFIX.fullmatch(source)
    if prefixed is not None:
        if prefixed["provider"] not in FILE_PROVIDERS:
            return ""
        source = prefixed["uri"]
    if DBNAME.search(source):
        return QgsDataSourceUri(source).database()
    return source.split("|", 1)[0]


def destination_value(value) -> str:
    """The path an output parameter value names ("" when temporary or empty)."""
    if isinstance(value, QgsProcessingOutputLayerDefinition):
        value = value.sink.staticValue()
    return file_part(str(value)) if value not in (None, "") else ""


def layer_file(value) -> str:
    """The source file of a layer input value (a layer, a feature source definition or a path), "" if none."""
    if isinstance(value, QgsProcessingFeatureSourceDefinition):
        value = value.source.staticValue()
    if isinstance(value, QgsMapLayer):
        value = value.source()
    if not isinstance(value, str):
        return ""
    path = file_part(value)
    return path if os.path.isfile(path) else ""


def same_file(first: str, second: str) -> bool:
    """Whether two paths name the same file (the second may not exist yet)."""
    if os.path.realpath(first) == os.path.realpath(second):
        return True
    return os.path.exists(first) and os.path.exists(second) and os.path.samefile(first, second)


def refuse_clashes(outputs: Iterable[tuple[str, str]], inputs: Iterable[tuple[str, str]]) -> None:
    """Refuse an output path equal to an input file or to another output.

    Parameters
    ----------
    outputs, inputs
        ``(parameter name, path)`` pairs; empty paths are skipped.

    Raises
    ------
    FieldcastError
        Naming the output parameter, the path and the input parameter or the other output.
    """
    inputs = [(name, path) for name, path in inputs if path]
    seen: list[tuple[str, str]] = []
    for name, path in outputs:
        if not path:
            continue
        for input_name, input_path in inputs:
            if same_file(path, input_path):
                raise FieldcastError(f"{name} would overwrite the input file {input_path} ({input_name}). "
                                     "Choose another file name.")
        for other_name, other_path in seen:
            if same_file(path, other_path):
                raise FieldcastError(f"{other_name} and {name} are the same file {path}; give each output its "
                                     "own file name.")
        seen.append((name, path))
