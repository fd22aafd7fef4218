"""Names of the result fields an algorithm appends to a copy of an input layer's fields.

A result name the layer already uses (case ignored) gets ``_2``, ``_3``, ... appended; a format with a short
field-name limit (a shapefile's dBASE table: 10 characters) clips the names first, so that the file keeps
distinct names and QGIS does not shorten them on its own.
"""
from __future__ import annotations

import os
from collections.abc import Iterable, Sequence

SHAPEFILE_NAME_LIMIT = 10
"""Longest field name of a shapefile's dBASE table (dBASE III+ format, common practice for .shp)."""


def name_limit(destination: str) -> int | None:
    """The longest field name the output file ``destination`` holds, None when the format sets no short limit."""
    extension = os.path.splitext(destination.split("|", 1)[0])[1].lower()
    return SHAPEFILE_NAME_LIMIT if extension in (".shp", ".dbf") else None


def free_names(wanted: Sequence[str], taken: Iterable[str], limit: int | None = None) -> list[str]:
    """``wanted``, each clipped to ``limit`` characters (None: not clipped) and with ``_2``, ``_3``, ... appended
    to any name an input field or an earlier name already has (case ignored; the suffix fits in the limit)."""
    used = {name.lower() for name in taken}
    names = []
    for name in wanted:
        base = name[:limit] if limit else name
        candidate, number = base, 1
        while candidate.lower() in used:
            number += 1
            suffix = f"_{number}"
            candidate = (base[:limit - len(suffix)] if limit else base) + suffix
        used.add(candidate.lower())
        names.append(candidate)
    return names


def result_names(field: str, suffixes: Sequence[str], taken: Iterable[str], limit: int | None) -> tuple[list[str], str]:
    """``<field>_<suffix>`` per suffix, the field part clipped so the suffix survives ``limit``, de-duplicated
    against ``taken`` by :func:`free_names`; and the log line that says which names changed ("" when none)."""
    wanted = [f"{field}_{suffix}" for suffix in suffixes]
    names = free_names([f"{field[:limit - len(suffix) - 1] if limit else field}_{suffix}" for suffix in suffixes],
                       taken, limit)
    changed = [f"{old} as {new}" for old, new in zip(wanted, names) if old != new]
    if not changed:
        return names, ""
    reason = f"the output's format holds names of up to {limit} characters, and " if limit else ""
    return names, (f"Result fields renamed ({reason}names the input layer already has get a number): "
                   + ", ".join(changed) + ".")
