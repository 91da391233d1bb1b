"""The layering of core/, read from the source: no import cycle between core modules (function
level imports included), and no core module imports the web, database or HTTP-client layers.

The graph is built with ast, not by importing, so an import inside a function counts as much as
one at the top. `from package import name` is an edge to package.name when that is a module of
core, else to the package itself (the convention of import-contract tools)."""

from __future__ import annotations

import ast
from pathlib import Path

CORE = Path(__file__).resolve().parents[2] / "core"
FORBIDDEN = {"service", "fastapi", "starlette", "pydantic", "pydantic_settings", "sqlite3",
             "httpx", "uvicorn", "prometheus_client"}


def module_name(path: Path) -> str:
    parts = path.relative_to(CORE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def core_modules() -> dict[str, Path]:
    return {module_name(p): p for p in sorted(CORE.rglob("*.py"))}


def imports_of(name: str, path: Path, known: set[str]) -> tuple[set[str], set[str]]:
    """(core modules imported, top-level names of every other import) of one module."""
    tree = ast.parse(path.read_text(), filename=str(path))
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    inner: set[str] = set()
    outer: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            targets = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                anchor = package.split(".")[: len(package.split(".")) - node.level + 1]
                base = ".".join([*anchor, base] if base else anchor)
            targets = [f"{base}.{alias.name}" if f"{base}.{alias.name}" in known else base
                       for alias in node.names]
        else:
            continue
        for target in targets:
            if target.split(".")[0] == "core":
                inner.add(target)
            else:
                outer.add(target.split(".")[0])
    inner.discard(name)
    return inner, outer


def graph() -> tuple[dict[str, set[str]], dict[str, set[str]]]:
    modules = core_modules()
    known = set(modules)
    edges: dict[str, set[str]] = {}
    other: dict[str, set[str]] = {}
    for name, path in modules.items():
        edges[name], other[name] = imports_of(name, path, known)
    # The registry imports every estimator module at run time (importlib): count those edges.
    edges["core.estimators.registry"] |= {
        name for name, path in modules.items()
        if name.startswith("core.estimators.") and "\nESTIMATOR = " in path.read_text()}
    return edges, other


def find_cycle(edges: dict[str, set[str]]) -> list[str] | None:
    """A cycle of the directed graph as a list of modules (first == last), or None."""
    state: dict[str, int] = {}  # 1 on the current path, 2 finished
    path: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = 1
        path.append(node)
        for nxt in sorted(edges.get(node, ())):
            if state.get(nxt) == 1:
                return [*path[path.index(nxt):], nxt]
            if nxt not in state:
                found = visit(nxt)
                if found:
                    return found
        path.pop()
        state[node] = 2
        return None

    for start in sorted(edges):
        if start not in state:
            found = visit(start)
            if found:
                return found
    return None


def test_no_import_cycle_between_core_modules() -> None:
    edges, _ = graph()
    assert len(edges) > 30, "the scan found too few core modules to mean anything"
    cycle = find_cycle(edges)
    assert cycle is None, "import cycle in core: " + " -> ".join(cycle or [])


def test_no_core_module_imports_the_service_web_or_database_layers() -> None:
    _, other = graph()
    bad = {name: sorted(found & FORBIDDEN) for name, found in other.items() if found & FORBIDDEN}
    assert not bad, f"core modules import outside layers: {bad}"


def test_the_cycle_finder_finds_a_cycle_and_a_function_level_import(tmp_path: Path) -> None:
    # The checks above can fail: a two-module cycle is found, and an import inside a function
    # is read like one at the top.
    assert find_cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert find_cycle({"a": {"b"}, "b": set()}) is None
    probe = tmp_path / "probe.py"
    probe.write_text("def f():\n    from core.measures import tail_estimates\n    import fastapi\n")
    inner, outer = imports_of("core.probe", probe, set(core_modules()))
    assert inner == {"core.measures"} and outer == {"fastapi"}
