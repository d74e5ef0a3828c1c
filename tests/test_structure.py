"""The code's shape, guarded: no import cycle among sheetnet's modules (imports inside functions
count), and no module over 400 lines (one idea per file)."""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parent.parent / "sheetnet"
MAX_LINES = 400


def _module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _imports(path: Path, modules: set[str]) -> set[str]:
    """Every sheetnet module ``path`` imports, at the top or inside a function."""
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom) and node.module and not node.level:
            found |= {node.module, *(f"{node.module}.{alias.name}" for alias in node.names)}
        elif isinstance(node, ast.Import):
            found |= {alias.name for alias in node.names}
    return {name for name in found if name in modules}


def import_graph() -> dict[str, set[str]]:
    paths = {_module_name(p): p for p in PACKAGE.rglob("*.py")}
    return {name: _imports(path, set(paths)) - {name} for name, path in paths.items()}


def cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components of more than one module (Tarjan 1972, iterative)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found = []
    for root in graph:
        if root in index:
            continue
        work = [(root, iter(sorted(graph[root])))]
        index[root] = low[root] = len(index)
        stack.append(root)
        on_stack.add(root)
        while work:
            node, children = work[-1]
            child = next(children, None)
            if child is not None:
                if child not in index:
                    index[child] = low[child] = len(index)
                    stack.append(child)
                    on_stack.add(child)
                    work.append((child, iter(sorted(graph[child]))))
                elif child in on_stack:
                    low[node] = min(low[node], index[child])
                continue
            work.pop()
            if work:
                low[work[-1][0]] = min(low[work[-1][0]], low[node])
            if low[node] == index[node]:
                component = []
                while True:
                    member = stack.pop()
                    on_stack.discard(member)
                    component.append(member)
                    if member == node:
                        break
                if len(component) > 1:
                    found.append(sorted(component))
    return found


def test_the_cycle_finder_finds_a_planted_cycle():
    graph = import_graph()
    graph["sheetnet.net.train"] = graph["sheetnet.net.train"] | {"sheetnet.cli"}
    assert any("sheetnet.cli" in c and "sheetnet.net.train" in c for c in cycles(graph))


def test_no_import_cycle():
    assert cycles(import_graph()) == []


def test_no_module_over_400_lines():
    long = {str(p.relative_to(PACKAGE.parent)): n for p in PACKAGE.rglob("*.py")
            if (n := len(p.read_text(encoding="utf-8").splitlines())) > MAX_LINES}
    assert long == {}


def test_imports_inside_functions_are_only_lazy_heavy_libraries_with_a_reason():
    """Imports belong at the top of a module; inside a function only a heavy optional library (with a
    one-line ``lazy:`` reason beside or above it) or the package's ``__getattr__``."""
    heavy = {"pandas", "openpyxl", "matplotlib", "formulas", "schedula", "sklearn", "onnx"}
    unexplained = []
    for path in PACKAGE.rglob("*.py"):
        lines = path.read_text(encoding="utf-8").splitlines()
        for function in ast.walk(ast.parse("\n".join(lines))):
            if not isinstance(function, ast.FunctionDef | ast.AsyncFunctionDef) or function.name == "__getattr__":
                continue
            for node in ast.walk(function):
                if not isinstance(node, ast.Import | ast.ImportFrom):
                    continue
                module = (node.module if isinstance(node, ast.ImportFrom) else node.names[0].name) or ""
                nearby = "\n".join(lines[max(0, node.lineno - 4):node.lineno])
                if module.split(".")[0] not in heavy or "lazy:" not in nearby:
                    unexplained.append(f"{path.name}:{node.lineno} {module}")
    assert unexplained == []


def test_the_container_and_the_engines_know_nothing_of_networks():
    """xlsx (the container) and engines (recalculation) import neither the trainer (net), nor the
    workbook's meaning (book), nor the checks."""
    graph = import_graph()
    for module, imported in graph.items():
        if module.startswith(("sheetnet.xlsx", "sheetnet.engines")):
            assert not [m for m in imported if m.startswith(("sheetnet.net", "sheetnet.book", "sheetnet.checks"))], \
                module


def test_the_command_line_and_the_estimators_reach_the_stages_only_through_the_api():
    """One way in: the faces call ``sheetnet.api``, which puts the stages (net, book, engines, checks,
    xlsx) together; a stage imported by a face would be a second assembly to keep in step. The
    estimators train through ``net`` because scikit-learn hands them arrays and encoded labels, not a
    table; their workbooks go through the API."""
    graph = import_graph()
    stages = ("sheetnet.net", "sheetnet.book", "sheetnet.engines", "sheetnet.checks", "sheetnet.xlsx", "sheetnet.rates")
    for face, allowed in (("sheetnet.cli", ()), ("sheetnet.estimator", ("sheetnet.net",))):
        reached = sorted(m for m in graph[face] if m.startswith(stages) and not m.startswith(allowed))
        assert reached == [], f"{face} imports stages directly: {reached}"
    assert "sheetnet.api" in graph["sheetnet.cli"] and "sheetnet.api" in graph["sheetnet.estimator"]
