"""A QgsApplication with Processing and the Fieldcast provider, for the plugin tests.

The plugin is the repository loaded as the package ``fieldcast`` (tests/repo_package.py),
as QGIS would load it from a folder of any name.
Import the fixtures into a test module with
``from qgis_support import fieldcast_plugin, qgis_processing  # noqa: F401`` (both names, as
pytest looks fixtures up in the test module).
"""
from __future__ import annotations

import importlib
import os
import sys

import numpy as np
import pytest

from repo_package import PACKAGE_NAME, load_repo_package

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

from qgis.core import (  # noqa: E402 - QT_QPA_PLATFORM must be set before Qt loads
    QgsApplication,
    QgsFeature,
    QgsField,
    QgsGeometry,
    QgsPointXY,
    QgsProcessingFeedback,
    QgsVectorLayer,
)

PROCESSING_PLUGINS = "/usr/share/qgis/python/plugins"
_STARTED: list = []  # the QgsApplication and the plugin object, once started


def field_type(name: str):
    """The plugin's version-proof attribute type ``name`` (e.g. ``"Double"``) for ``QgsField``."""
    return importlib.import_module(f"{PACKAGE_NAME}.plugin.field_types").field_type(name)


def started_plugin():
    """Start QGIS and Processing and register the provider through ``classFactory``, once per test process.

    Every test module imports the fixtures, and pytest keeps a session fixture per module, so the one
    QgsApplication and plugin object live here.
    """
    if not _STARTED:
        QgsApplication.setPrefixPath("/usr", True)
        app = QgsApplication([], False)
        app.initQgis()
        if PROCESSING_PLUGINS not in sys.path:
            sys.path.append(PROCESSING_PLUGINS)
        from processing.core.Processing import Processing

        Processing.initialize()
        plugin = load_repo_package().classFactory(None)
        plugin.initProcessing()
        _STARTED.extend([app, plugin])
    return _STARTED[1]


@pytest.fixture(scope="session")
def fieldcast_plugin():
    """The plugin object from ``classFactory``, its provider registered."""
    return started_plugin()


@pytest.fixture(scope="session")
def qgis_processing(fieldcast_plugin):
    """The ``processing`` module, with the Fieldcast provider registered."""
    import processing

    return processing


def point_layer(xy: np.ndarray, columns: dict[str, np.ndarray], crs: str | None = "EPSG:28992",
                geometry: str = "Point") -> QgsVectorLayer:
    """A memory layer with one point per row of ``xy`` and a double field per column (NaN -> NULL).

    ``crs=None`` makes a layer without CRS; ``geometry="MultiPoint"`` stores single-part multipoints.
    """
    uri = f"{geometry}?crs={crs or ''}"  # an empty crs= gives a layer without CRS
    layer = QgsVectorLayer(uri, "samples", "memory")
    provider = layer.dataProvider()
    provider.addAttributes([QgsField(name, field_type("Double")) for name in columns])
    layer.updateFields()
    features = []
    for row, (x, y) in enumerate(np.asarray(xy, dtype=float)):
        feature = QgsFeature(layer.fields())
        point = QgsGeometry.fromPointXY(QgsPointXY(x, y))
        if geometry == "MultiPoint":
            point.convertToMultiType()
        feature.setGeometry(point)
        feature.setAttributes([None if np.isnan(v[row]) else float(v[row]) for v in columns.values()])
        features.append(feature)
    provider.addFeatures(features)
    return layer


class CancelAfterFirstProgress(QgsProcessingFeedback):
    """Feedback that asks to cancel as soon as the algorithm reports progress past its starting point."""

    def __init__(self, start_percent: float = 30.0) -> None:
        super().__init__()
        self.start_percent = start_percent

    def setProgress(self, progress: float) -> None:
        super().setProgress(progress)
        if progress > self.start_percent:
            self.cancel()


class Log(QgsProcessingFeedback):
    """Feedback that keeps every log line."""

    def __init__(self) -> None:
        super().__init__()
        self.lines: list[str] = []

    def pushInfo(self, info: str) -> None:
        self.lines.append(info)
        super().pushInfo(info)

    def pushWarning(self, warning: str) -> None:
        self.lines.append(warning)
        super().pushWarning(warning)


def polygon_layer(wkts: list[str], crs: str | None = "EPSG:28992") -> QgsVectorLayer:
    """A memory polygon layer named "site" holding ``wkts``; ``crs=None`` gives it no CRS."""
    layer = QgsVectorLayer(f"Polygon?crs={crs or ''}", "site", "memory")
    features = []
    for wkt in wkts:
        feature = QgsFeature()
        feature.setGeometry(QgsGeometry.fromWkt(wkt))
        features.append(feature)
    layer.dataProvider().addFeatures(features)
    return layer
