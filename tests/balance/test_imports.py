"""The balance engine's modules import one another downwards only.

Parses every module of ``perftest/balance`` with :mod:`ast` (no import is executed)
and collects each import, including those inside functions, since a function-level
import that closes a loop is still a cycle: it only moves the failure from import
time to call time.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = "perftest.balance"
ROOT = Path(__file__).resolve().parents[2] / "perftest" / "balance"

# Stages above the balance engine (docs/architecture.md, layer order): the engine
# must import none of them.
HIGHER = (
    "perftest.evaluation",
    "perftest.planning",
    "perftest.report",
    "perftest.scale",
    "perftest.cli",
    "perftest.demo",
)


def _modules(root: Path) -> dict[str, Path]:
    mods = {}
    for path in sorted(root.glob("*.py")):
        name = PACKAGE if path.stem == "__init__" else f"{PACKAGE}.{path.stem}"
        mods[name] = path
    return mods


def _imported(path: Path, name: str, known: set[str]) -> list[tuple[str, int]]:
    """Every perftest module named by an import in ``path``, with its line."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    package = name if path.stem == "__init__" else name.rpartition(".")[0]
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out.extend((alias.name, node.lineno) for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.rsplit(".", node.level - 1)[0] if node.level > 1 else package
                mod = f"{base}.{node.module}" if node.module else base
            else:
                mod = node.module or ""
            for alias in node.names:
                # "from perftest.balance import _dense" imports the submodule; a name
                # that is not a submodule comes from the package's __init__.
                sub = f"{mod}.{alias.name}"
                out.append((sub if sub in known else mod, node.lineno))
    return [(m, line) for m, line in out if m == "perftest" or m.startswith("perftest.")]


def _graph(root: Path) -> tuple[dict[str, list[tuple[str, int]]], dict[str, Path]]:
    mods = _modules(root)
    known = set(mods)
    return {name: _imported(path, name, known) for name, path in mods.items()}, mods


def _find_cycle(edges: dict[str, set[str]]) -> list[str] | None:
    """One cycle of the directed graph as a list of nodes (first == last), or None."""
    state: dict[str, int] = {}  # 1 on the stack, 2 done
    stack: list[str] = []

    def visit(node):
        state[node] = 1
        stack.append(node)
        for nxt in sorted(edges.get(node, ())):
            if state.get(nxt) == 1:
                return [*stack[stack.index(nxt) :], nxt]
            if nxt not in state:
                found = visit(nxt)
                if found:
                    return found
        stack.pop()
        state[node] = 2
        return None

    for node in sorted(edges):
        if node not in state:
            found = visit(node)
            if found:
                return found
    return None


def _balance_edges(graph):
    return {
        src: {dst for dst, _ in targets if dst in graph and dst != src}
        for src, targets in graph.items()
    }


def test_no_import_cycle_in_balance():
    graph, _ = _graph(ROOT)
    cycle = _find_cycle(_balance_edges(graph))
    assert cycle is None, "import cycle in perftest/balance: " + " -> ".join(cycle)


def test_no_balance_module_imports_the_package_itself():
    # Importing the package runs its __init__, which imports every module: from a
    # module of the package that is a cycle through the back door.
    graph, _ = _graph(ROOT)
    offenders = [
        f"{src} line {line}"
        for src, targets in graph.items()
        if src != PACKAGE
        for dst, line in targets
        if dst == PACKAGE
    ]
    assert offenders == []


def test_balance_imports_no_higher_stage():
    graph, _ = _graph(ROOT)
    offenders = [
        f"{src} line {line} imports {dst}"
        for src, targets in graph.items()
        for dst, line in targets
        if any(dst == h or dst.startswith(h + ".") for h in HIGHER)
    ]
    assert offenders == []


@pytest.mark.parametrize(
    ("sources", "cycle"),
    [
        # The cycle this test was written against: result -> gross -> linear -> result,
        # the closing import inside a function.
        (
            {
                "result.py": "def f():\n    from perftest.balance.gross import t\n",
                "gross.py": "def g():\n    from perftest.balance.linear import r\n",
                "linear.py": "from perftest.balance.result import R\n",
            },
            True,
        ),
        # A submodule reached through "from package import module".
        (
            {
                "_sparse.py": "from perftest.balance import linear\n",
                "linear.py": "from . import _sparse\n",
            },
            True,
        ),
        # Downwards only.
        (
            {
                "result.py": "import numpy\n",
                "linear.py": "from perftest.balance.result import R\n",
                "gross.py": "from perftest.balance import result, linear\n",
            },
            False,
        ),
    ],
)
def test_cycle_finder_sees_cycles(tmp_path, sources, cycle):
    # The checker itself must be able to fail: feed it small packages with and
    # without a loop.
    for fname, text in sources.items():
        (tmp_path / fname).write_text(text, encoding="utf-8")
    graph, _ = _graph(tmp_path)
    assert (_find_cycle(_balance_edges(graph)) is not None) is cycle
