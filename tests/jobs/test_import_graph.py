"""The import graph of the job services has no cycle, and none is hidden in a function body.

Read from the source with `ast` (nothing is imported), so a cycle held apart by an import inside
a function counts as the cycle it is. Also the layer rules of DEVELOPERS.md: `service/cv` imports
nothing of ours outside itself, and `service` never imports `workers`.
"""

from __future__ import annotations

import ast
from collections.abc import Iterator
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]


def _modules(package: str) -> dict[str, Path]:
    root = REPO / package.replace(".", "/")
    found = {}
    for path in sorted(root.rglob("*.py")):
        parts = path.relative_to(REPO).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        found[name] = path
    return found


def _imports(path: Path, name: str) -> Iterator[tuple[str, bool]]:
    """(imported module, inside a function) for every import statement of a file."""
    tree = ast.parse(path.read_text(), str(path))
    nested: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
            nested |= {id(inner) for inner in ast.walk(node) if inner is not node}
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                yield alias.name, id(node) in nested
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                base = ".".join(package.split(".")[: len(package.split(".")) - node.level + 1])
                base = f"{base}.{node.module}" if node.module else base
            for alias in node.names:
                # `from service.jobs import lifecycle` names a module; `from x import f`, x
                yield f"{base}.{alias.name}", id(node) in nested
                yield base, id(node) in nested


def _graph(package: str) -> dict[str, set[str]]:
    modules = _modules(package)
    return {
        name: {target for target, _ in _imports(path, name) if target in modules and target != name}
        for name, path in modules.items()
    }


def _cycle(graph: dict[str, set[str]]) -> list[str] | None:
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = 1
        stack.append(node)
        for nxt in sorted(graph[node]):
            if state.get(nxt) == 1:
                return [*stack[stack.index(nxt) :], nxt]
            if nxt not in state and (found := visit(nxt)):
                return found
        stack.pop()
        state[node] = 2
        return None

    for node in sorted(graph):
        if node not in state and (found := visit(node)):
            return found
    return None


def test_the_job_services_import_one_another_without_a_cycle() -> None:
    graph = _graph("service.jobs")
    assert len(graph) > 10  # the walk found the package
    assert _cycle(graph) is None, " -> ".join(_cycle(graph) or [])


def test_a_cycle_is_found_when_there_is_one() -> None:
    # the walker itself, on a graph with a known cycle (else a broken walker passes the above)
    assert _cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert _cycle({"a": {"b"}, "b": set()}) is None


def test_no_job_service_imports_inside_a_function() -> None:
    hidden = [
        f"{name} imports {target}"
        for name, path in _modules("service.jobs").items()
        for target, nested in _imports(path, name)
        if nested and target.startswith("service.")
    ]
    assert hidden == []


def test_the_engine_imports_nothing_of_ours_and_service_never_imports_workers() -> None:
    outside_engine = [
        f"{name} imports {target}"
        for name, path in _modules("service.cv").items()
        for target, _ in _imports(path, name)
        if target.split(".")[0] in ("service", "workers") and not target.startswith("service.cv")
    ]
    assert outside_engine == []
    workers = [
        f"{name} imports {target}"
        for name, path in _modules("service").items()
        for target, _ in _imports(path, name)
        if target.split(".")[0] == "workers"
    ]
    assert workers == []
