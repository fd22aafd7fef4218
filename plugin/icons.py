"""Paths of the plugin's own SVG icons (folder ``icons/`` at the plugin root)."""
from __future__ import annotations

import os

from qgis.PyQt.QtGui import QIcon

ICON_FOLDER = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "icons")


def icon_path(file_name: str) -> str:
    """Absolute path of an icon file in ``icons/``."""
    return os.path.join(ICON_FOLDER, file_name)


def icon(file_name: str) -> QIcon:
    """The icon in ``icons/`` as a QIcon."""
    return QIcon(icon_path(file_name))
