"""Fieldcast: point samples to kriging surfaces with uncertainty (QGIS Processing plugin).

QGIS calls :func:`classFactory` when it loads the plugin; the folder may carry
any name, so everything below is imported relatively.
"""


def classFactory(iface):
    """Return the plugin object QGIS keeps while the plugin is loaded."""
    from .plugin.plugin import FieldcastPlugin

    return FieldcastPlugin(iface)
