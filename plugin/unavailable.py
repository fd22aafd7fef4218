"""What QGIS keeps instead of the full plugin when a required package is missing.

:class:`UnavailablePlugin` says which package to install (message bar, message log, and an empty
Processing provider whose long name says it) and loads nothing that needs the missing package.
"""
from __future__ import annotations

from qgis.core import Qgis, QgsMessageLog, QgsProcessingProvider

from .plugin import FieldcastPlugin

LOG_TAG = "Fieldcast"


class UnavailableProvider(QgsProcessingProvider):
    """The Fieldcast provider without algorithms; its long name carries the install advice."""

    def __init__(self, advice: str) -> None:
        super().__init__()
        self.advice = advice

    def id(self) -> str:
        return "fieldcast"

    def name(self) -> str:
        return "Fieldcast"

    def longName(self) -> str:
        return self.advice

    def loadAlgorithms(self) -> None:
        QgsMessageLog.logMessage(self.advice, LOG_TAG, Qgis.Critical)


class UnavailablePlugin(FieldcastPlugin):
    """Registers :class:`UnavailableProvider` and, in the desktop, shows the advice in the message bar."""

    def __init__(self, iface, advice: str) -> None:
        super().__init__(iface)
        self.advice = advice

    def new_provider(self) -> QgsProcessingProvider:
        return UnavailableProvider(self.advice)

    def initGui(self) -> None:
        """Register the empty provider and show the advice in the message bar until the user closes it."""
        super().initGui()
        if self.iface is not None:
            self.iface.messageBar().pushMessage("Fieldcast", self.advice, level=Qgis.Critical, duration=0)
