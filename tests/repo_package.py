"""Import the repository as one package, the way QGIS imports the plugin folder.

The plugin folder may carry any name and its code uses relative imports only, so
the tests load the repository root under the fixed name :data:`PACKAGE_NAME`
and import ``fieldcast.algorithms...`` and ``fieldcast.plugin...`` from it. Only
the root ``__init__.py`` runs, which imports nothing from QGIS.
"""
from __future__ import annotations

import importlib.util
import sys
from pathlib import Path
from types import ModuleType

REPO_ROOT = Path(__file__).resolve().parent.parent
PACKAGE_NAME = "fieldcast"


def load_repo_package() -> ModuleType:
    """Register the repository root as the package :data:`PACKAGE_NAME` (once) and return it."""
    if PACKAGE_NAME not in sys.modules:
        spec = importlib.util.spec_from_file_location(
            PACKAGE_NAME, REPO_ROOT / "__init__.py", submodule_search_locations=[str(REPO_ROOT)])
        package = importlib.util.module_from_spec(spec)
        sys.modules[PACKAGE_NAME] = package
        spec.loader.exec_module(package)
    return sys.modules[PACKAGE_NAME]
