"""The layers DEVELOPERS.md draws, checked on the source: no cycles, a pure engine, no workers.

The graph is read statically (ast over every .py file of `service`), so it also sees imports
written inside functions, the usual way a cycle is hidden from the interpreter. `from service.x
import y` counts as an import of the module service.x.y when that is a module, else of service.x.
Imports under `if TYPE_CHECKING:` count too: a cycle mypy must untangle is a cycle a reader must.
"""

from __future__ import annotations

import ast
from collections.abc import Iterable
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
OURS = ("service", "workers")


def _module_name(path: Path, root: Path) -> str:
    parts = list(path.relative_to(root).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def modules_under(root: Path, packages: Iterable[str]) -> dict[str, Path]:
    """Every module of the given top-level packages, by dotted name."""
    found: dict[str, Path] = {}
    for package in packages:
        for path in sorted((root / package).rglob("*.py")):
            found[_module_name(path, root)] = path
    return found


def _is_ours(name: str) -> bool:
    return any(name == top or name.startswith(f"{top}.") for top in OURS)


def _absolute(node: ast.ImportFrom, module: str, is_package: bool) -> str:
    if not node.level:
        return node.module or ""
    # `from . import x` inside a package's __init__ is relative to the package itself
    base = module.split(".")
    base = base if is_package else base[:-1]
    base = base[: len(base) - (node.level - 1)]
    return ".".join([*base, node.module] if node.module else base)


def imports_of(module: str, path: Path, known: set[str]) -> set[str]:
    """The modules of ours that `module` imports anywhere in its file (top level or not)."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    targets: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            targets.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            source = _absolute(node, module, path.name == "__init__.py")
            for alias in node.names:
                submodule = f"{source}.{alias.name}"
                targets.add(submodule if submodule in known else source)
    return {t for t in targets if _is_ours(t) and t != module}


def import_graph(root: Path, packages: Iterable[str] = ("service",)) -> dict[str, set[str]]:
    """module -> the modules of ours it imports, for every module of `packages`."""
    known = modules_under(root, OURS)
    wanted = modules_under(root, packages)
    return {name: imports_of(name, path, set(known)) for name, path in wanted.items()}


def _components(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan's algorithm)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[list[str]] = []

    def visit(node: str) -> None:
        index[node] = low[node] = len(index)
        stack.append(node)
        on_stack.add(node)
        for nxt in sorted(graph.get(node, ())):
            if nxt not in graph:
                continue
            if nxt not in index:
                visit(nxt)
                low[node] = min(low[node], low[nxt])
            elif nxt in on_stack:
                low[node] = min(low[node], index[nxt])
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

    for node in sorted(graph):
        if node not in index:
            visit(node)
    return found


def _shortest_cycle(graph: dict[str, set[str]], start: str, within: set[str]) -> list[str]:
    # breadth first from `start` back to itself, staying inside its component
    paths = {start: [start]}
    frontier = [start]
    while frontier:
        following: list[str] = []
        for node in frontier:
            for nxt in sorted(graph[node] & within):
                if nxt == start:
                    return [*paths[node], start]
                if nxt not in paths:
                    paths[nxt] = [*paths[node], nxt]
                    following.append(nxt)
        frontier = following
    raise AssertionError(f"{start} is in a component but on no cycle")


def import_cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """One named cycle per tangle of modules: the shortest through its first module."""
    return [
        _shortest_cycle(graph, component[0], set(component)) for component in _components(graph)
    ]


def _describe(cycles: list[list[str]]) -> str:
    return "\n".join(" -> ".join(cycle) for cycle in cycles)


def _tangles(graph: dict[str, set[str]]) -> str:
    # each tangle: one cycle to start untying from, and every module caught in it
    lines = []
    for component in _components(graph):
        cycle = _shortest_cycle(graph, component[0], set(component))
        lines.append(" -> ".join(cycle))
        if len(component) > len(cycle) - 1:
            lines.append(f"    (the same tangle holds {', '.join(component)})")
    return "\n".join(lines)


def test_no_import_cycles() -> None:
    graph = import_graph(ROOT)
    assert not import_cycles(graph), f"import cycles in service:\n{_tangles(graph)}"


def package_graph(graph: dict[str, set[str]]) -> dict[str, set[str]]:
    """The graph folded onto the packages directly under service (service.api, service.web...)."""

    def package(module: str) -> str:
        return ".".join(module.split(".")[:2])

    folded: dict[str, set[str]] = {}
    for module, targets in graph.items():
        folded.setdefault(package(module), set()).update(package(t) for t in targets)
    return {name: targets & set(folded) - {name} for name, targets in folded.items()}


def test_no_import_cycles_between_packages() -> None:
    # Module cycles aside, two packages leaning on each other (the report pages on the API's
    # dependencies while the API mounted the pages) cannot be read or moved one at a time.
    packages = package_graph(import_graph(ROOT))
    assert not import_cycles(packages), f"packages that import each other:\n{_tangles(packages)}"


def test_engine_imports_nothing_of_ours_outside_the_engine() -> None:
    graph = import_graph(ROOT)
    outside = {
        f"{module} imports {target}"
        for module, targets in graph.items()
        if module == "service.cv" or module.startswith("service.cv.")
        for target in targets
        if not (target == "service.cv" or target.startswith("service.cv."))
    }
    assert not outside, "service/cv must stay pure:\n" + "\n".join(sorted(outside))


def test_service_never_imports_workers() -> None:
    graph = import_graph(ROOT)
    reaching = {
        f"{module} imports {target}"
        for module, targets in graph.items()
        for target in targets
        if target == "workers" or target.startswith("workers.")
    }
    assert not reaching, "service must not import workers:\n" + "\n".join(sorted(reaching))


def _write(root: Path, relative: str, text: str) -> None:
    path = root / relative
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text, encoding="utf-8")


def test_the_walker_finds_a_cycle_hidden_in_a_function(tmp_path: Path) -> None:
    # A planted package: a -> b at the top, b -> c.d through `from ... import`, e -> a; then
    # c.d -> a written inside a function with a relative import, the way cycles hide.
    _write(tmp_path, "service/__init__.py", "")
    _write(tmp_path, "service/a.py", "from service import b\n")
    _write(tmp_path, "service/b.py", "from service.c import d\n")
    _write(tmp_path, "service/c/__init__.py", "")
    _write(tmp_path, "service/c/d.py", "from service.c import NAME_NOT_A_MODULE\n")
    _write(tmp_path, "service/e.py", "import service.a\nimport workers.tasks\n")
    _write(tmp_path, "workers/__init__.py", "")
    _write(tmp_path, "workers/tasks.py", "")

    graph = import_graph(tmp_path)

    assert graph["service.a"] == {"service.b"}
    assert graph["service.b"] == {"service.c.d"}
    assert graph["service.c.d"] == {"service.c"}  # a name, not a module: the package it is in
    assert graph["service.e"] == {"service.a", "workers.tasks"}
    assert import_cycles(graph) == []

    _write(tmp_path, "service/c/d.py", "def late():\n    from .. import a\n    return a\n")
    cycles = import_cycles(import_graph(tmp_path))

    assert cycles == [["service.a", "service.b", "service.c.d", "service.a"]]
    assert _describe(cycles) == "service.a -> service.b -> service.c.d -> service.a"


START_UP_WORDS = ("start-up", "startup", "slow to import")


def hidden_imports(path: Path) -> list[tuple[int, int, str]]:
    """(def line, line, source) of each import of ours written inside a function body."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    found = []
    for func in ast.walk(tree):
        if not isinstance(func, ast.FunctionDef | ast.AsyncFunctionDef):
            continue
        for node in ast.walk(func):
            ours = (isinstance(node, ast.Import) and any(_is_ours(a.name) for a in node.names)) or (
                isinstance(node, ast.ImportFrom) and bool(node.level or _is_ours(node.module or ""))
            )
            if ours:
                found.append((func.lineno, node.lineno, ast.unparse(node)))
    return sorted(set(found))


def test_imports_inside_functions_say_they_are_for_start_up() -> None:
    # An import of ours inside a function is allowed only to keep start-up cheap, and then a
    # comment between the function's first line and the import says so; any other reason is a
    # cycle being hidden, or soon will be. The command line (service/cli) defers its imports
    # by rule, so `foldwise --help` loads no engine (DEVELOPERS.md, Layers).
    unexplained = []
    for name, path in modules_under(ROOT, ("service",)).items():
        if name.startswith("service.cli."):
            continue
        lines = path.read_text(encoding="utf-8").splitlines()
        for def_line, lineno, text in hidden_imports(path):
            before = " ".join(lines[def_line - 1 : lineno]).lower()
            if not any(word in before for word in START_UP_WORDS):
                unexplained.append(f"{name}:{lineno}: {text}")
    assert unexplained == [], "imports inside functions without a start-up reason:\n" + "\n".join(
        unexplained
    )


def test_the_function_import_check_sees_one(tmp_path: Path) -> None:
    # the check itself, on a planted file (else a walker that saw nothing would pass the above)
    planted = tmp_path / "m.py"
    planted.write_text("def f():\n    from service.cv import plan\n    import json\n")
    assert hidden_imports(planted) == [(1, 2, "from service.cv import plan")]
