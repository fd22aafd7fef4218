"""Attribute field types that work across QGIS versions.

QGIS 3.38 moved ``QgsField`` from ``QVariant.Type`` to ``QMetaType.Type``, and Qt6 builds
no longer have ``QVariant.Double`` and friends; QGIS 3.22 accepts only ``QVariant.Type``.
"""
from __future__ import annotations

from qgis.core import Qgis
from qgis.PyQt.QtCore import QMetaType, QVariant

METATYPE_FIELDS_SINCE = 33800


def field_type(name: str):
    """The field type called ``name`` (``"Double"``, ``"LongLong"``, ``"String"``, ...) for this QGIS."""
    if Qgis.QGIS_VERSION_INT >= METATYPE_FIELDS_SINCE:
        return getattr(QMetaType.Type, name)
    return getattr(QVariant, name)
