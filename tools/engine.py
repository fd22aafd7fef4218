"""Load the repository's engine package for the scripts in tools/.

The repository folder may carry any name (it is the plugin folder), so the
engine is loaded from its path under the fixed name ``fieldcast_engine``.
"""
from __future__ import annotations

import importlib.util
import sys
from pathlib import Path
from types import ModuleType

REPO_ROOT = Path(__file__).resolve().parents[1]
ENGINE_NAME = "fieldcast_engine"


def load_engine() -> ModuleType:
    """Import ``algorithms/`` as ``fieldcast_engine`` (idempotent) and return it.

    After this call ``import fieldcast_engine.predict.kriging`` and the like work.
    """
    if ENGINE_NAME in sys.modules:
        return sys.modules[ENGINE_NAME]
    package_dir = REPO_ROOT / "algorithms"
    spec = importlib.util.spec_from_file_location(
        ENGINE_NAME, package_dir / "__init__.py", submodule_search_locations=[str(package_dir)]
    )
    module = importlib.util.module_from_spec(spec)
    sys.modules[ENGINE_NAME] = module
    spec.loader.exec_module(module)
    return module
