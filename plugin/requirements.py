"""The Python packages Fieldcast needs at run time, and advice on installing the ones that are missing.

Imports no QGIS and none of the packages at module level: the root ``classFactory`` asks
:func:`missing_requirements` before it loads anything that needs them.
"""
from __future__ import annotations

import importlib
from dataclasses import dataclass


@dataclass(frozen=True)
class Requirement:
    """A package: the modules the engine imports from it, and its names for apt and pip."""

    name: str
    modules: tuple[str, ...]
    debian: str
    pip: str


REQUIREMENTS = (
    Requirement("numpy", ("numpy",), "python3-numpy", "numpy"),
    Requirement("scipy", ("scipy.linalg", "scipy.optimize", "scipy.sparse.csgraph", "scipy.spatial",
                          "scipy.special"), "python3-scipy", "scipy"),
    Requirement("GDAL (Python bindings)", ("osgeo.gdal", "osgeo.ogr", "osgeo.osr"), "python3-gdal", "GDAL"),
    Requirement("pyproj", ("pyproj",), "python3-pyproj", "pyproj"),
)


def importable(module: str) -> bool:
    """Whether ``module`` imports (a package present but broken counts as missing)."""
    try:
        importlib.import_module(module)
    except ImportError:
        return False
    return True


def missing_requirements() -> list[Requirement]:
    """The requirements of which some module does not import, in the order of :data:`REQUIREMENTS`."""
    return [requirement for requirement in REQUIREMENTS
            if not all(importable(module) for module in requirement.modules)]


def install_advice(missing: list[Requirement]) -> str:
    """One message naming the missing packages and how to install them, then to restart QGIS."""
    names = ", ".join(requirement.name for requirement in missing)
    debian = " ".join(requirement.debian for requirement in missing)
    pip = " ".join(requirement.pip for requirement in missing)
    return (f"Fieldcast cannot start: the Python package(s) {names} could not be imported. Install them and "
            f"restart QGIS. On Debian or Ubuntu: sudo apt install {debian}. Elsewhere, in the Python that QGIS "
            f"runs (on Windows the OSGeo4W Shell): python -m pip install {pip}.")
