"""Import the repository as one package, the way QGIS imports the plugin folder.

The plugin folder may carry any name and its code uses relative imports only, so
the tests load the repository root under the fixed name :data:`PACKAGE_NAME`
and import ``fieldcast.algorithms...`` and ``fieldcast.plugin...`` from it. Only
the root ``__init__.py`` runs, which imports nothing from QGIS.
"""
from __future__ import annotations

import importlib.util
import os
import sys
from pathlib import Path
from types import ModuleType

REPO_ROOT = Path(__file__).resolve().parent.parent
PACKAGE_NAME = "fieldcast"


def use_system_proj_data() -> None:
    """Point pyproj at the base interpreter's PROJ database when neither PROJ_DATA nor PROJ_LIB is set.

    In a venv ``sys.prefix`` is the venv, so pyproj cannot find the system PROJ database by itself and warns on
    import (and CRS work in GeoTIFF writing fails).
    """
    base_proj_dir = Path(sys.base_prefix, "share", "proj")
    if "PROJ_DATA" not in os.environ and "PROJ_LIB" not in os.environ and (base_proj_dir / "proj.db").exists():
        os.environ["PROJ_DATA"] = str(base_proj_dir)


def load_repo_package() -> ModuleType:
    """Register the repository root as the package :data:`PACKAGE_NAME` (once) and return it, with pyproj
    pointed at the system PROJ database (:func:`use_system_proj_data`)."""
    use_system_proj_data()
    if PACKAGE_NAME not in sys.modules:
        spec = importlib.util.spec_from_file_location(
            PACKAGE_NAME, REPO_ROOT / "__init__.py", submodule_search_locations=[str(REPO_ROOT)])
        package = importlib.util.module_from_spec(spec)
        sys.modules[PACKAGE_NAME] = package
        spec.loader.exec_module(package)
    return sys.modules[PACKAGE_NAME]
