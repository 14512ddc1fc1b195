"""The service floor's layers, read from the source with the standard library's ast:
no import loop anywhere in app/, and each floor imports only the floors below it
(DEVELOPERS.md states the rule of each in one line)."""

from __future__ import annotations

import ast
import functools
from collections.abc import Iterator
from pathlib import Path

APP = Path(__file__).resolve().parents[2] / "app"


def _module_name(path: Path) -> str:
    parts = path.relative_to(APP.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


@functools.cache  # the sources do not change during a run: each file is parsed once
def _imports(path: Path) -> tuple[str, ...]:
    """Every module an app file imports, at the top or inside a function (absolute names)."""
    return tuple(_walk_imports(path))


def _walk_imports(path: Path) -> Iterator[str]:
    package = _module_name(path) if path.name == "__init__.py" else _module_name(path).rpartition(".")[0]
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            yield from (alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - node.level + 1]
                module = ".".join(base + ([node.module] if node.module else []))
            else:
                module = node.module or ""
            yield module
            yield from (f"{module}.{alias.name}" for alias in node.names)


def _graph() -> dict[str, set[str]]:
    files = {_module_name(p): p for p in APP.rglob("*.py")}
    graph: dict[str, set[str]] = {}
    for name, path in files.items():
        graph[name] = {m for m in _imports(path) if m in files and m != name}
    return graph


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in graph[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                found.append(sorted(component))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return found


def test_no_module_of_app_imports_itself_back_through_another():
    assert _cycles(_graph()) == []


def _importers(prefix: str) -> dict[str, set[str]]:
    return {name: deps for name, deps in _graph().items() if name == prefix or name.startswith(prefix + ".")}


def _offending(prefix: str, forbidden: tuple[str, ...]) -> dict[str, list[str]]:
    out = {}
    for name, deps in _importers(prefix).items():
        bad = sorted(d for d in deps if d.startswith(forbidden))
        if bad:
            out[name] = bad
    return out


def _third_party(prefix: str, forbidden: tuple[str, ...]) -> dict[str, list[str]]:
    out = {}
    for path in APP.rglob("*.py"):
        name = _module_name(path)
        if name == prefix or name.startswith(prefix + "."):
            bad = sorted({m for m in _imports(path) if m.split(".")[0] in forbidden})
            if bad:
                out[name] = bad
    return out


def test_routers_only_call_services_never_the_store():
    assert _offending("app.routers", ("app.store", "app.database", "app.tables")) == {}


def test_services_know_nothing_of_the_web():
    assert _offending("app.services", ("app.routers", "app.problems", "app.main")) == {}
    assert _third_party("app.services", ("fastapi", "starlette")) == {}


def test_the_presentation_layer_reads_nothing_but_the_model_and_the_plain_helpers():
    assert _offending("app.presentation", ("app.services", "app.store", "app.routers", "app.database")) == {}


def test_the_store_never_calls_up_into_services_or_routers():
    assert _offending("app.store", ("app.services", "app.routers", "app.presentation")) == {}
