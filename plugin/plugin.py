"""The object QGIS keeps while Fieldcast is loaded: registers the Processing provider."""
from __future__ import annotations

from qgis.core import QgsApplication, QgsProcessingProvider


class FieldcastPlugin:
    """Adds the Fieldcast provider to the Processing toolbox and removes it on unload.

    ``initProcessing`` is what ``qgis_process`` calls for plugins with
    ``hasProcessingProvider=yes``; the desktop calls ``initGui``.
    """

    def __init__(self, iface) -> None:
        self.iface = iface
        self.provider: QgsProcessingProvider | None = None

    def new_provider(self) -> QgsProcessingProvider:
        """A new Fieldcast provider; imported here because it loads the engine and the packages it needs."""
        from .provider import FieldcastProvider

        return FieldcastProvider()

    def initProcessing(self) -> None:
        """Register the provider (once); QGIS refuses, and deletes, a second provider with the same id."""
        if self.provider is None:
            provider = self.new_provider()
            if QgsApplication.processingRegistry().addProvider(provider):
                self.provider = provider

    def initGui(self) -> None:
        """Called by the desktop when the plugin is enabled."""
        self.initProcessing()

    def unload(self) -> None:
        """Remove the provider from the toolbox."""
        if self.provider is not None:
            QgsApplication.processingRegistry().removeProvider(self.provider)
            self.provider = None
