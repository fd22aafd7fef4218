"""Print, as JSON, the field each Fieldcast value-field widget pre-selects for a GeoPackage layer.

Run as a script by tests/plugin/test_plugin_dialogs.py: widgets need a QgsApplication with its GUI
enabled, which the shared test process does not start. Arguments: the GeoPackage path, then the
algorithm names. The widget is the one the toolbox dialog builds (QgsGui's processing registry); its
parent layer widget is stood in for by a wrapper that returns the GeoPackage's path.
"""
from __future__ import annotations

import json
import os
import sys
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from qgis.core import QgsApplication, QgsProcessingContext, QgsProject  # noqa: E402 - QT_QPA_PLATFORM first
from qgis.gui import (  # noqa: E402
    QgsAbstractProcessingParameterWidgetWrapper,
    QgsGui,
    QgsProcessingGui,
    QgsProcessingParameterWidgetContext,
)
from qgis.PyQt import sip  # noqa: E402
from qgis.PyQt.QtWidgets import QWidget  # noqa: E402

from repo_package import load_repo_package  # noqa: E402


class LayerPathWrapper(QgsAbstractProcessingParameterWidgetWrapper):
    """A parent layer widget whose value is always one layer path."""

    def __init__(self, definition, path: str) -> None:
        super().__init__(definition)
        self.path = path

    def createWidget(self):
        return QWidget()

    def setWidgetValue(self, value, context) -> None:
        pass

    def widgetValue(self):
        return self.path


def preselected(algorithm, path: str, context: QgsProcessingContext):
    """The field name the algorithm's FIELD widget holds once its INPUT widget holds ``path``; None for none."""
    widget_context = QgsProcessingParameterWidgetContext()
    widget_context.setProject(QgsProject.instance())
    widget = QgsGui.processingGuiRegistry().createParameterWidgetWrapper(algorithm.parameterDefinition("FIELD"),
                                                                         QgsProcessingGui.Standard)
    widget.setWidgetContext(widget_context)
    combo = widget.createWrappedWidget(context)  # kept: the wrapper does not own its widget
    parent = LayerPathWrapper(algorithm.parameterDefinition("INPUT"), path)
    parent.setWidgetContext(widget_context)
    parent_widget = parent.createWrappedWidget(context)
    widget.setParentLayerWrapperValue(parent)
    value = widget.parameterValue()
    # Deleted now, while their Python wrappers live: deleteLater left them to exitQgis, whose flush of the
    # deferred deletes reached Python objects already collected and died with SIGBUS.
    sip.delete(combo)
    sip.delete(parent_widget)
    return value if isinstance(value, str) and value else None


def main(path: str, names: list[str]) -> None:
    QgsApplication.setPrefixPath("/usr", True)
    app = QgsApplication([], True)
    app.initQgis()
    plugin = load_repo_package().classFactory(None)
    plugin.initProcessing()
    registry = QgsApplication.processingRegistry()
    context = QgsProcessingContext()
    print(json.dumps({name: preselected(registry.algorithmById(f"fieldcast:{name}"), path, context)
                      for name in names}))
    plugin.unload()
    app.exitQgis()


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2:])
