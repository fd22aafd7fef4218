"""The engine's public API (algorithms/__init__.py) and the rule that plugin/ and tools/ use only it."""
from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

import fieldcast.algorithms as engine

REPO_ROOT = Path(__file__).resolve().parent.parent


@pytest.mark.parametrize("name", engine.__all__)
def test_every_public_name_resolves(name):
    assert getattr(engine, name) is not None


def test_unknown_name_is_an_attribute_error():
    with pytest.raises(AttributeError, match="no_such_name"):
        engine.no_such_name  # noqa: B018


def engine_imports(path: Path, package_prefix: str) -> list[str]:
    """Modules below the engine that ``path`` imports from, other than the engine package itself."""
    found = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom):
            module = node.module or ""
            if node.level and module.startswith("algorithms."):
                found.append(module)
            if not node.level and module.startswith(f"{package_prefix}."):
                found.append(module)
    return found


def test_plugin_and_tools_import_only_the_public_api():
    offenders = {}
    for path in [*sorted((REPO_ROOT / "plugin").rglob("*.py")), *sorted((REPO_ROOT / "tools").glob("*.py"))]:
        if imports := engine_imports(path, "fieldcast.algorithms"):
            offenders[str(path.relative_to(REPO_ROOT))] = imports
    assert offenders == {}


def test_importing_the_engine_loads_no_numerical_library():
    # The plugin must be able to load and explain a missing scipy or GDAL, so the package import is free of them.
    code = (
        "import sys; sys.path.insert(0, 'tests'); from repo_package import load_repo_package; load_repo_package();"
        "import fieldcast.algorithms; print(sorted(m for m in ('scipy', 'osgeo', 'pyproj') if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], cwd=REPO_ROOT, capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"
