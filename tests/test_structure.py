"""The layout rules a newcomer can rely on (docs/architecture.md, docs/extending.md).

Common practice, not a published reference: modules small enough to read in one sitting, no
function longer than a screenful or two, no private names reached into from another module,
and no import cycle between the package's modules at import time.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1] / "timeslice"
MAX_MODULE_LINES = 700
MAX_FUNCTION_LINES = 100


def _modules():
    return sorted(ROOT.rglob("*.py"))


def _name(path: Path) -> str:
    parts = list(path.relative_to(ROOT.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def test_no_module_is_too_long():
    long = {str(p.relative_to(ROOT.parent)): p.read_text().count("\n") for p in _modules()}
    assert {k: n for k, n in long.items() if n > MAX_MODULE_LINES} == {}


def test_no_function_is_too_long():
    found = {}
    for p in _modules():
        for node in ast.walk(ast.parse(p.read_text())):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                n = node.end_lineno - node.lineno + 1
                if n > MAX_FUNCTION_LINES:
                    found[f"{p.relative_to(ROOT.parent)}:{node.name}"] = n
    assert found == {}


def test_no_private_name_is_imported_from_another_module():
    found = []
    for p in _modules():
        for node in ast.walk(ast.parse(p.read_text())):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("timeslice"):
                found += [f"{p.relative_to(ROOT.parent)}: {node.module}.{a.name}"
                          for a in node.names
                          if a.name.startswith("_") and not a.name.startswith("__")]
    assert found == []


def _top_level_imports(path: Path) -> set[str]:
    """timeslice modules imported when `path` is imported (module level, not in functions)."""
    names = set()
    tree = ast.parse(path.read_text())
    for node in tree.body:
        stmts = [node]
        if isinstance(node, ast.If):  # `if TYPE_CHECKING:` blocks do not run
            continue
        if isinstance(node, ast.Try):
            stmts = node.body
        for st in stmts:
            if isinstance(st, ast.Import):
                names |= {a.name for a in st.names if a.name.startswith("timeslice")}
            elif isinstance(st, ast.ImportFrom) and (st.module or "").startswith("timeslice"):
                names.add(st.module)
                # `from timeslice.x import y` may import the submodule timeslice.x.y
                names |= {f"{st.module}.{a.name}" for a in st.names}
    return names


def test_no_import_cycle_between_modules():
    modules = {_name(p): p for p in _modules()}
    graph = {m: {n for n in _top_level_imports(p) if n in modules and n != m}
             for m, p in modules.items()}
    # a package's __init__ importing its own submodules is how a package exports; drop the
    # edges from a module up to its own package so that re-exports are not counted as cycles
    for m in graph:
        graph[m] = {n for n in graph[m] if not m.startswith(n + ".")}
    cycles = []
    state: dict[str, int] = {}

    def visit(m, stack):
        state[m] = 1
        for n in sorted(graph[m]):
            if state.get(n) == 1:
                cycles.append(" -> ".join([*stack[stack.index(n):], n]))
            elif n not in state:
                visit(n, [*stack, n])
        state[m] = 2

    for m in sorted(graph):
        if m not in state:
            visit(m, [m])
    assert cycles == []


@pytest.mark.parametrize("pair", [("timeslice.niche.learners", "timeslice.niche.models"),
                                  ("timeslice.readers.netcdf", "timeslice.readers.raster")])
def test_named_cycles_are_gone(pair):
    """The two cycles issue 13 named: neither module imports the other at import time."""
    a, b = pair
    paths = {_name(p): p for p in _modules()}
    if a not in paths or b not in paths:
        return
    assert not ({b} & _top_level_imports(paths[a]) and {a} & _top_level_imports(paths[b]))
