"""The engine's import graph: no circles, fitting and models independent of prediction, no QGIS.

Every module under ``algorithms/`` is parsed with :mod:`ast` (not imported), so
imports inside functions and ``if TYPE_CHECKING:`` blocks count as well; relative
imports are resolved the way Python resolves them (the language reference,
"The import statement": each leading dot beyond the first goes up one package).
"""
from __future__ import annotations

import ast
from pathlib import Path

import pytest

REPO_ROOT = Path(__file__).resolve().parent.parent
ENGINE = "algorithms"
LOWER_LAYERS = ("algorithms.fit", "algorithms.model")
UPPER_LAYERS = ("algorithms.predict", "algorithms.simulate")


def module_files(root: Path, package: str) -> dict[str, Path]:
    """Dotted module name -> file for every ``.py`` file of ``package`` under ``root``."""
    files = {}
    for path in sorted((root / package).rglob("*.py")):
        parts = path.relative_to(root).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        files[name] = path
    return files


def _resolved(module: str, is_package: bool, node: ast.ImportFrom) -> str:
    """Absolute dotted name of the module an ``ImportFrom`` names (relative or not)."""
    if node.level == 0:
        return node.module or ""
    parts = module.split(".")
    base = parts if is_package else parts[:-1]
    assert node.level <= len(base), f"{module}: a relative import goes above the top package"
    base = base[:len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def imported_names(module: str, path: Path) -> set[str]:
    """Every dotted name a module imports, at any depth of its code; ``from m import x`` gives m and m.x."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            target = _resolved(module, path.name == "__init__.py", node)
            names.add(target)
            names.update(f"{target}.{alias.name}" for alias in node.names if alias.name != "*")
    return names


def import_graph(root: Path, package: str) -> tuple[dict[str, set[str]], dict[str, set[str]]]:
    """Edges between the package's own modules, and every name each module imports.

    An import of ``a.b.c`` also runs ``a/__init__`` and ``a/b/__init__``, so it is an
    edge to each of those packages too (and to ``a.b.c`` only if that is a module,
    not a name defined in ``a.b``).
    """
    files = module_files(root, package)
    edges: dict[str, set[str]] = {}
    names: dict[str, set[str]] = {}
    for module, path in files.items():
        names[module] = imported_names(module, path)
        targets = set()
        for name in names[module]:
            parts = name.split(".")
            targets.update(".".join(parts[:i]) for i in range(1, len(parts) + 1))
        edges[module] = {t for t in targets if t in files and t != module}
    return edges, names


def find_cycle(edges: dict[str, set[str]]) -> list[str] | None:
    """One import circle as a list of modules (first repeated at the end), or None (depth-first search)."""
    state: dict[str, str] = {}
    stack: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = "open"
        stack.append(node)
        for successor in sorted(edges.get(node, ())):
            if state.get(successor) == "open":
                return stack[stack.index(successor):] + [successor]
            if successor not in state:
                found = visit(successor)
                if found:
                    return found
        stack.pop()
        state[node] = "done"
        return None

    for start in sorted(edges):
        if start not in state:
            found = visit(start)
            if found:
                return found
    return None


def _in(name: str, packages: tuple[str, ...]) -> bool:
    return any(name == p or name.startswith(p + ".") for p in packages)


ENGINE_EDGES, ENGINE_NAMES = import_graph(REPO_ROOT, ENGINE)


def test_the_graph_sees_relative_function_level_and_type_checking_imports(tmp_path):
    # A made-up package with one import of each kind, and a circle through a function-level import.
    package = tmp_path / "pkg"
    (package / "sub").mkdir(parents=True)
    (package / "__init__.py").write_text("")
    (package / "sub" / "__init__.py").write_text("from .. import top\n")
    (package / "top.py").write_text("def f():\n    from .sub.leaf import g\n")
    (package / "sub" / "leaf.py").write_text(
        "from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n    from ..top import f\ndef g():\n    pass\n")
    edges, _ = import_graph(tmp_path, "pkg")
    assert edges["pkg.top"] == {"pkg", "pkg.sub", "pkg.sub.leaf"}
    assert edges["pkg.sub.leaf"] == {"pkg", "pkg.top"}
    assert edges["pkg.sub"] == {"pkg", "pkg.top"}
    cycle = find_cycle(edges)
    assert cycle is not None and cycle[0] == cycle[-1] and "pkg.top" in cycle
    (package / "top.py").write_text("def f():\n    pass\n")
    (package / "sub" / "__init__.py").write_text("")
    assert find_cycle(import_graph(tmp_path, "pkg")[0]) is None


def test_the_engine_graph_holds_known_imports():
    # Spot checks that the parse covers the real engine: the fit dispatcher uses both fits, the local
    # predictor and the Vecchia likelihood share the anisotropy frame of the covariance model.
    assert {"algorithms.fit.exact_fit", "algorithms.fit.vecchia_fit"} <= ENGINE_EDGES["algorithms.fit.fitting"]
    assert "algorithms.model.covariance" in ENGINE_EDGES["algorithms.fit.vecchia"]
    assert "algorithms.model.covariance" in ENGINE_EDGES["algorithms.predict.local"]
    assert len(ENGINE_EDGES) > 40


def test_the_engine_has_no_import_circle():
    assert find_cycle(ENGINE_EDGES) is None, " -> ".join(find_cycle(ENGINE_EDGES))


@pytest.mark.parametrize("module", sorted(m for m in ENGINE_EDGES if _in(m, LOWER_LAYERS)))
def test_fitting_and_models_do_not_import_prediction_or_simulation(module):
    upward = sorted(t for t in ENGINE_EDGES[module] if _in(t, UPPER_LAYERS))
    assert not upward, f"{module} imports {', '.join(upward)}"


def test_the_engine_does_not_import_qgis():
    offenders = sorted(m for m, names in ENGINE_NAMES.items() if any(_in(n, ("qgis",)) for n in names))
    assert not offenders, f"these engine modules import qgis: {', '.join(offenders)}"
