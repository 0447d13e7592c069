"""The package's layout rules: stages import downwards only, no cycles, small modules.

These are the house rules of docs/architecture.md, checked on the source with ``ast``
(imports inside functions count), so that a newcomer can trust the map.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

import perftest

PACKAGE = Path(perftest.__file__).resolve().parent

#: Import layers, lowest first. A module may import from its own layer or a lower one.
LAYERS = (
    (
        "perftest.errors",
        "perftest.units",
        "perftest.unit_names",
        "perftest.display",
        "perftest.defaults",
    ),
    ("perftest.thermo",),
    ("perftest.plant",),
    ("perftest.run",),
    ("perftest.importers",),
    ("perftest.balance",),
    ("perftest.evaluation",),
    ("perftest.planning",),
    ("perftest.report",),
    ("perftest.scale",),
    ("perftest.cli", "perftest.demo"),
)

#: Names that may be imported from the package root by any layer (no logic behind them).
ROOT_NAMES = {"__version__"}


def _module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


MODULES = {_module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def _layer(module: str) -> int | None:
    for i, names in enumerate(LAYERS):
        if any(module == n or module.startswith(n + ".") for n in names):
            return i
    return None


def _resolve(module: str, path: Path, node: ast.ImportFrom | ast.Import) -> list[str]:
    """Modules of the package that one import statement loads."""
    if isinstance(node, ast.Import):
        return [a.name for a in node.names if a.name.split(".")[0] == "perftest"]
    if node.level:
        base = module.split(".") if path.name == "__init__.py" else module.split(".")[:-1]
        base = base[: len(base) - (node.level - 1)]
        target = ".".join(base + ([node.module] if node.module else []))
    else:
        target = node.module or ""
    if target.split(".")[0] != "perftest":
        return []
    found = []
    for alias in node.names:
        sub = f"{target}.{alias.name}"
        if sub in MODULES:
            found.append(sub)
        elif target == "perftest" and alias.name in ROOT_NAMES:
            continue
        elif target == "perftest":
            # A public name of the lazy map: the module that defines it.
            found.append(perftest._LAZY.get(alias.name, "perftest"))
        else:
            found.append(target)
    return found


def _graph() -> dict[str, set[str]]:
    graph: dict[str, set[str]] = {}
    for module, path in MODULES.items():
        tree = ast.parse(path.read_text(encoding="utf-8"))
        edges: set[str] = set()
        for node in ast.walk(tree):
            if isinstance(node, (ast.Import, ast.ImportFrom)):
                edges.update(t for t in _resolve(module, path, node) if t != module)
        graph[module] = edges
    return graph


GRAPH = _graph()


def test_every_module_has_a_layer():
    loose = [m for m in MODULES if m != "perftest" and _layer(m) is None]
    assert not loose, f"modules outside the layer map of docs/architecture.md: {loose}"


def test_imports_go_down_the_layers():
    upward = []
    for module, targets in GRAPH.items():
        if module == "perftest":
            continue
        mine = _layer(module)
        for target in targets:
            theirs = _layer(target)
            if theirs is not None and mine is not None and theirs > mine:
                upward.append(f"{module} -> {target}")
    assert not upward, "imports that go up the layers:\n" + "\n".join(sorted(upward))


def _strongly_connected(graph):
    # Tarjan's algorithm, iterative enough for a package of this size.
    index, low, on, stack, out, counter = {}, {}, set(), [], [], [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in graph.get(v, ()):
            if w not in graph:
                continue
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            out.append(comp)

    for v in graph:
        if v not in index:
            visit(v)
    return out


def _without_package_reexports(graph):
    """Drop the edges from a package's ``__init__`` to its own sub-modules.

    A package that re-exports its modules' names is not part of a cycle through them:
    Python runs the sub-module first in any import order that starts below it.
    """
    trimmed = {}
    for module, targets in graph.items():
        is_package = MODULES[module].name == "__init__.py"
        trimmed[module] = {t for t in targets if not (is_package and t.startswith(module + "."))}
    return trimmed


def test_no_import_cycle():
    parts = _strongly_connected(_without_package_reexports(GRAPH))
    cycles = [sorted(c) for c in parts if len(c) > 1]
    assert not cycles, f"import cycles: {cycles}"


@pytest.mark.parametrize("module", sorted(MODULES))
def test_no_module_past_a_thousand_lines(module):
    # The house rule is "split by concept past about 800 lines"; 1000 is the hard limit.
    lines = MODULES[module].read_text(encoding="utf-8").count("\n")
    assert lines <= 1000, f"{module} has {lines} lines"


def test_few_modules_at_the_top():
    top = sorted(p.name for p in PACKAGE.glob("*.py"))
    assert len(top) <= 8, top


def test_every_public_name_imports_from_the_top():
    for name in perftest.__all__:
        assert getattr(perftest, name) is not None, name
