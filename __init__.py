"""Fieldcast: point samples to kriging surfaces with uncertainty (QGIS Processing plugin).

QGIS calls :func:`classFactory` when it loads the plugin; the folder may carry
any name, so everything below is imported relatively.
"""


def classFactory(iface):
    """Return the plugin object QGIS keeps while the plugin is loaded.

    When a required package (numpy, scipy, GDAL, pyproj) does not import, the object only says which
    package to install, instead of failing with an ImportError.
    """
    from .plugin.requirements import install_advice, missing_requirements

    missing = missing_requirements()
    if missing:
        from .plugin.unavailable import UnavailablePlugin

        return UnavailablePlugin(iface, install_advice(missing))
    from .plugin.plugin import FieldcastPlugin

    return FieldcastPlugin(iface)
