"""The package's shape: imports run one way, and no module reaches into another's privates.

Layers, lowest first (DEVELOPERS.md draws them):

0. ``sqlrisk.kernels.*`` and ``sqlrisk.errors``: numerics on numpy arrays, no DuckDB,
   Arrow or CLI;
1. ``sqlrisk.adapters.*``: Arrow in, kernel calls, Arrow out; the function catalog;
   ``sqlrisk.spark.*``, the same bodies registered on Spark;
2. the application: saved queries, the runner, charts, output formats, the demo;
3. ``sqlrisk.cli`` and the package's ``__init__``.

A module may import its own layer or lower ones, never a higher one, and the
graph of imports (every ``import`` in a module, those inside functions too) has
no cycle. Read with ``ast``; no module is imported.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parent.parent / "sqlrisk"


def module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


MODULES = {module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def layer(name: str) -> int:
    if name.startswith("sqlrisk.kernels") or name == "sqlrisk.errors":
        return 0
    if name.startswith(("sqlrisk.adapters", "sqlrisk.spark")):
        return 1
    if name in ("sqlrisk", "sqlrisk.cli"):
        return 3
    return 2


def _resolve(module: str, node: ast.ImportFrom) -> str:
    if not node.level:
        return node.module or ""
    is_package = MODULES[module].name == "__init__.py"
    base = module.split(".")
    base = base if is_package else base[:-1]
    base = base[:len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def imports(module: str) -> list[tuple[str, list[str], int]]:
    """``(imported module, names taken from it, line)`` for every import in ``module``
    that lands in the package; ``from pkg import sub`` counts as importing ``pkg.sub``."""
    tree = ast.parse(MODULES[module].read_text())
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [(a.name, [], node.lineno) for a in node.names if a.name.startswith("sqlrisk")]
        elif isinstance(node, ast.ImportFrom):
            target = _resolve(module, node)
            if not target.startswith("sqlrisk"):
                continue
            subs = [a.name for a in node.names if f"{target}.{a.name}" in MODULES]
            names = [a.name for a in node.names if f"{target}.{a.name}" not in MODULES]
            out += [(f"{target}.{s}", [], node.lineno) for s in subs]
            if names:
                out.append((target, names, node.lineno))
    return out


GRAPH = {m: sorted({t for t, _, _ in imports(m) if t in MODULES and t != m}) for m in MODULES}


def test_the_walk_sees_the_package():
    assert {"sqlrisk.cli", "sqlrisk.adapters.catalog", "sqlrisk.kernels.lattice"} <= set(MODULES)
    assert "sqlrisk.adapters.registry" in GRAPH["sqlrisk"]
    assert "sqlrisk.kernels.readout" in GRAPH["sqlrisk.kernels.accuracy"]


def test_no_import_cycle():
    state: dict[str, int] = {}  # 1 on the path, 2 done
    path: list[str] = []

    def visit(m: str) -> list[str] | None:
        state[m] = 1
        path.append(m)
        for t in GRAPH[m]:
            if state.get(t) == 1:
                return path[path.index(t):] + [t]
            if t not in state and (cycle := visit(t)):
                return cycle
        path.pop()
        state[m] = 2
        return None

    for m in MODULES:
        if m not in state:
            cycle = visit(m)
            assert cycle is None, " -> ".join(cycle)


@pytest.mark.parametrize("module", sorted(MODULES))
def test_imports_point_down_the_layers(module):
    up = [(t, line) for t, _, line in imports(module)
          if t in MODULES and layer(t) > layer(module)]
    assert not up, f"{module} (layer {layer(module)}) imports {up}"


@pytest.mark.parametrize("module", sorted(MODULES))
def test_no_module_takes_another_modules_private_names(module):
    taken = [(t, n, line) for t, names, line in imports(module) for n in names
             if n.startswith("_") and not n.startswith("__")]
    tree = ast.parse(MODULES[module].read_text())
    aliases = {}
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and _resolve(module, node).startswith("sqlrisk"):
            for a in node.names:
                if f"{_resolve(module, node)}.{a.name}" in MODULES:
                    aliases[a.asname or a.name] = a.name
    reached = [(node.value.id, node.attr, node.lineno) for node in ast.walk(tree)
               if isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name)
               and node.value.id in aliases and node.attr.startswith("_")
               and not node.attr.startswith("__")]
    assert not taken and not reached, taken + reached
