"""The package's import graph: one direction of data flow, no private names across modules.

Every ``import`` of the package is read with :mod:`ast` at any depth (module level, inside
``if TYPE_CHECKING:``, inside functions and methods). The rules (DEVELOPERS.md, "Rules of
the code"; docs/ARCHITECTURE.md draws the flow):

- the modules of ``wetmap`` import each other without a cycle;
- no module imports a name starting with ``_`` from another wetmap module;
- wetmap's own modules are imported at module level only (a function-level import hides
  an edge of the graph);
- a function-level import of anything else is one of the heavy or platform-only
  libraries of :data:`LAZY_ALLOWED`, loaded only by the function that needs it.
"""

from __future__ import annotations

import ast
from graphlib import CycleError, TopologicalSorter
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "wetmap"

#: Libraries a function may import for itself: large compiled or output-only libraries
#: (loading them at import time would slow every command that does not draw, write or
#: distribute), and ``fcntl`` (POSIX only).
LAZY_ALLOWED = frozenset({
    "matplotlib", "weasyprint", "folium", "branca", "jinja2", "PIL", "ezdxf", "openpyxl", "geopandas", "pyogrio",
    "dask", "distributed", "skimage", "astral", "timezonefinder", "scipy", "rasterio", "pyproj", "fcntl",
})


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _modules() -> dict[str, Path]:
    return {_module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def _resolve(module: str, path: Path, node: ast.ImportFrom) -> str:
    """The absolute module name of a ``from ... import`` (relative levels resolved)."""
    if not node.level:
        return node.module or ""
    package = module.split(".") if path.name == "__init__.py" else module.split(".")[:-1]
    base = package[: len(package) - node.level + 1]
    return ".".join(base + ([node.module] if node.module else []))


def _imports(module: str, path: Path):
    """``(target module, imported names, at module level, line)`` of every import in ``path``."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    module_level = {id(n) for n in tree.body}
    for stmt in tree.body:  # `if TYPE_CHECKING:` and `try:` blocks at module level count as module level
        if isinstance(stmt, (ast.If, ast.Try)):
            module_level.update(id(n) for n in ast.walk(stmt))
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                yield alias.name, (), id(node) in module_level, node.lineno
        elif isinstance(node, ast.ImportFrom):
            yield _resolve(module, path, node), tuple(a.name for a in node.names), id(node) in module_level, node.lineno


def _graph() -> dict[str, set[str]]:
    """Module -> the wetmap modules it imports."""
    mods = _modules()
    graph: dict[str, set[str]] = {m: set() for m in mods if m != "wetmap"}
    for module, path in mods.items():
        for target, names, _, _ in _imports(module, path):
            if not target.startswith("wetmap"):
                continue
            # `from wetmap import pipeline` / `from . import tables` import modules
            targets = [f"{target}.{n}" for n in names if f"{target}.{n}" in mods] or [target]
            for t in targets:
                if t != module and t in mods and t != "wetmap":
                    graph.setdefault(module, set()).add(t)
    return graph


def test_the_walk_sees_the_package():
    """The walk finds the modules and their edges (a walk that saw nothing would pass every rule)."""
    graph = _graph()
    assert {"wetmap.pipeline", "wetmap.results", "wetmap.export.tables", "wetmap.detect"} <= set(graph)
    assert "wetmap.results" in graph["wetmap.pipeline"]
    assert "wetmap.results" in graph["wetmap.export.tables"]
    assert sum(len(v) for v in graph.values()) > 60


def _reaches(graph: dict[str, set[str]], start: str) -> set[str]:
    seen, todo = set(), [start]
    while todo:
        for t in graph.get(todo.pop(), ()):
            if t not in seen:
                seen.add(t)
                todo.append(t)
    return seen


def test_no_import_cycle():
    try:
        TopologicalSorter(_graph()).prepare()  # graphlib (standard library) finds a cycle if there is one
    except CycleError as err:
        pytest.fail("import cycle: " + " -> ".join(err.args[1]))


def test_the_cycle_check_finds_a_cycle():
    with pytest.raises(CycleError):
        TopologicalSorter({"a": {"b"}, "b": {"c"}, "c": {"a"}}).prepare()


def test_exporters_depend_on_the_result_model_not_on_the_pipeline():
    graph = _graph()
    for exporter in (m for m in graph if m.startswith("wetmap.export.")):
        assert "wetmap.pipeline" not in _reaches(graph, exporter), exporter


def test_no_private_name_taken_across_modules():
    found = []
    for module, path in _modules().items():
        for target, names, _, line in _imports(module, path):
            if target.startswith("wetmap") and target != module:
                found += [f"{path.relative_to(ROOT)}:{line}: {target}.{n}" for n in names
                          if n.startswith("_") and n != "__version__"]
    assert found == []


def test_function_level_imports_only_for_heavy_optional_libraries():
    found = []
    for module, path in _modules().items():
        for target, _, module_level, line in _imports(module, path):
            if module_level:
                continue
            root = target.split(".")[0]
            if target.startswith("wetmap") or root not in LAZY_ALLOWED:
                found.append(f"{path.relative_to(ROOT)}:{line}: {target}")
    assert found == []


@pytest.mark.parametrize("source, expected", [
    ("from ..results import x\n", [("wetmap.results", True)]),
    ("def f():\n    from . import tables\n", [("wetmap.export", False)]),
    ("class A:\n    def f(self):\n        import wetmap.detect\n", [("wetmap.detect", False)]),
    ("if TYPE_CHECKING:\n    from .gis import _y\n", [("wetmap.export.gis", True)]),
])
def test_the_walk_resolves_imports_at_any_depth(tmp_path, source, expected):
    path = tmp_path / "a.py"
    path.write_text(source)
    assert [(t, level) for t, _, level, _ in _imports("wetmap.export.a", path)] == expected
