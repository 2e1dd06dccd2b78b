"""The package's shape: the import graph is a DAG in the pipeline's order, functions and
modules stay small enough to read in one sitting."""
from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "sparsedemand"
MAX_FUNCTION_LINES = 100
MAX_MODULE_LINES = 650  # "about 600": a little slack so one docstring does not force a split

# The pipeline's order; a module may import only from its own stage or an earlier one.
# io and panel are one stage (io builds panels); calendar profiles scale the methods' levels;
# metrics are pure scoring functions that the router's holdout selection and the backtest both
# use; the budget allocation is part of the stock stage.
STAGES = [
    ("errors", "_version"), ("io", "panel"), ("classify",), ("methods",), ("profiles",),
    ("metrics",), ("route",), ("evaluate",), ("stock", "budget"), ("runs",), ("report",),
    ("engine", "cli", "demo"),
]
_STAGE_OF = {name: i for i, names in enumerate(STAGES) for name in names}


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _modules() -> dict[str, Path]:
    return {_module_name(p): p for p in PACKAGE.rglob("*.py")}


def _imports(name: str, path: Path, known: set[str]) -> set[str]:
    """Every package module that ``path`` imports, at top level or inside a function."""
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    found = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.Import):
            found.update(a.name for a in node.names if a.name in known)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target not in known:
                continue
            for alias in node.names:  # `from pkg import submodule` imports the submodule
                found.add(f"{target}.{alias.name}" if f"{target}.{alias.name}" in known else target)
    found.discard(name)
    return found


def _graph() -> dict[str, set[str]]:
    mods = _modules()
    known = set(mods)
    return {name: _imports(name, path, known) for name, path in mods.items()}


def _find_cycle(graph: dict[str, set[str]]) -> list[str] | None:
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = 1
        stack.append(node)
        for dep in sorted(graph[node]):
            if state.get(dep) == 1:
                return stack[stack.index(dep):] + [dep]
            if dep not in state and (cycle := visit(dep)):
                return cycle
        stack.pop()
        state[node] = 2
        return None

    for node in sorted(graph):
        if node not in state and (cycle := visit(node)):
            return cycle
    return None


def _stage(name: str) -> int | None:
    parts = name.split(".")
    return _STAGE_OF.get(parts[1]) if len(parts) > 1 else None


def test_cycle_finder_finds_a_planted_cycle():
    # The checker itself must be able to fail.
    assert _find_cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert _find_cycle({"a": {"b"}, "b": set()}) is None


def test_import_graph_has_no_cycles():
    graph = _graph()
    # The package root re-exports the public API and is imported by nobody inside it.
    importers = sorted(n for n, deps in graph.items() if "sparsedemand" in deps)
    assert importers == [], f"modules importing the package root: {importers}"
    assert _find_cycle(graph) is None, " -> ".join(_find_cycle(graph))


def test_every_module_has_a_stage():
    assert [n for n in _graph() if n != "sparsedemand" and _stage(n) is None] == []


def test_imports_follow_the_pipeline_order():
    backwards = []
    for name, deps in _graph().items():
        own = _stage(name)
        if own is None:
            continue
        for dep in deps:
            theirs = _stage(dep)
            if theirs is not None and theirs > own:
                backwards.append(f"{name} -> {dep}")
    assert backwards == []


def _functions(path: Path):
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            yield node.name, node.lineno, node.end_lineno - node.lineno + 1


@pytest.mark.parametrize("name", sorted(_modules()))
def test_functions_and_modules_are_short(name):
    path = _modules()[name]
    long = [f"{fn} (line {line}, {n} lines)" for fn, line, n in _functions(path) if n > MAX_FUNCTION_LINES]
    assert long == [], f"{name}: functions over {MAX_FUNCTION_LINES} lines: {long}"
    n_lines = len(path.read_text().splitlines())
    assert n_lines <= MAX_MODULE_LINES, f"{name}: {n_lines} lines"
