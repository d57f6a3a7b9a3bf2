"""The layers of DEVELOPERS.md as a test: web and cli -> services -> store / ingest -> core, and no circle.

Every module under ``app/`` is parsed with ``ast`` (nothing is imported), so imports inside functions and
under ``TYPE_CHECKING`` count as much as those at the top of a file."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
APP = ROOT / "app"

CORE_FORBIDDEN = (
    "app.web",
    "app.services",
    "app.store",
    "app.ingest",
    "app.cli",
    "app.main",
    "fastapi",
    "starlette",
    "sqlmodel",
    "sqlalchemy",
    "jinja2",
    "uvicorn",
)
"""What the pure maths may not use: the other layers, the web framework, the database and templates."""


def module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def all_modules() -> dict[str, Path]:
    return {
        module_name(path): path
        for path in sorted(APP.rglob("*.py"))
        if "migrations" not in path.relative_to(APP).parts  # Alembic scripts, loaded by Alembic by path
    }


MODULES = all_modules()


def imported_names(name: str, source: str, is_package: bool = False) -> set[str]:
    """Every module named by an import statement anywhere in the file (top level, functions, classes,
    ``TYPE_CHECKING`` blocks). ``from package import name`` names ``package.name`` when that is a module of
    the project, else ``package``; relative imports are resolved against the module's package."""
    package = name if is_package else name.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base_parts = package.split(".")
                base_parts = base_parts[: len(base_parts) - (node.level - 1)]
                base = ".".join(base_parts + ([node.module] if node.module else []))
            else:
                base = node.module or ""
            for alias in node.names:
                child = f"{base}.{alias.name}"
                found.add(child if child in MODULES else base)
    return found


IMPORTS = {
    name: imported_names(name, path.read_text(encoding="utf-8"), path.name == "__init__.py")
    for name, path in MODULES.items()
}


def within(name: str, prefix: str) -> bool:
    return name == prefix or name.startswith(prefix + ".")


def breaches(importers: str, forbidden: tuple[str, ...]) -> list[str]:
    return sorted(
        f"{name} imports {target}"
        for name, targets in IMPORTS.items()
        if within(name, importers)
        for target in targets
        if any(within(target, prefix) for prefix in forbidden)
    )


def test_every_module_is_seen() -> None:
    """The parser finds the layers' modules (a test that read no file would pass everything)."""
    for expected in (
        "app.cli",
        "app.web.api",
        "app.services.corpora",
        "app.store.corpora",
        "app.core.spectrum",
    ):
        assert expected in MODULES
    assert "app.store.corpora" in IMPORTS["app.services.corpora"]


def test_web_and_cli_reach_store_and_ingest_only_through_services() -> None:
    outside = ("app.store", "app.ingest")
    assert breaches("app.web", outside) + breaches("app.cli", outside) == []


def test_cli_does_not_import_the_web() -> None:
    assert breaches("app.cli", ("app.web",)) == []


def test_core_is_pure_maths() -> None:
    assert breaches("app.core", CORE_FORBIDDEN) == []


def test_core_opens_no_files() -> None:
    """No file I/O in the maths: no ``open(...)``, ``Path(...)`` or ``read_text``/``write_bytes`` calls."""
    found = []
    for name, path in MODULES.items():
        if not within(name, "app.core"):
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Call):
                called = node.func
                label = called.id if isinstance(called, ast.Name) else getattr(called, "attr", "")
                if label in {"open", "Path", "read_text", "read_bytes", "write_text", "write_bytes"}:
                    found.append(f"{name}:{node.lineno} calls {label}")
    assert found == []


def test_services_do_not_import_the_web() -> None:
    assert breaches("app.services", ("app.web", "app.cli")) == []


def circles(graph: dict[str, set[str]]) -> list[list[str]]:
    """The strongly connected components with more than one member (or a module importing itself), by
    Tarjan's algorithm (Tarjan 1972, from memory), each sorted."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[list[str]] = []

    def visit(node: str) -> None:
        index[node] = low[node] = len(index)
        stack.append(node)
        on_stack.add(node)
        for target in sorted(graph[node]):
            if target not in index:
                visit(target)
                low[node] = min(low[node], low[target])
            elif target in on_stack:
                low[node] = min(low[node], index[target])
        if low[node] == index[node]:
            members = []
            while True:
                member = stack.pop()
                on_stack.discard(member)
                members.append(member)
                if member == node:
                    break
            if len(members) > 1 or node in graph[node]:
                found.append(sorted(members))

    for node in sorted(graph):
        if node not in index:
            visit(node)
    return sorted(found)


def project_graph() -> dict[str, set[str]]:
    return {name: {t for t in targets if t in MODULES and t != name} for name, targets in IMPORTS.items()}


def test_circle_finder_finds_a_circle() -> None:
    """The finder itself: a three-module circle and a self-import are found, a chain is not."""
    graph = {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"d"}, "e": {"a"}}
    assert circles(graph) == [["a", "b", "c"], ["d"]]
    assert circles({"a": {"b"}, "b": set()}) == []


def test_no_circle_among_app_modules() -> None:
    found = circles(project_graph())
    assert found == [], "import circles (members of each): " + "; ".join(", ".join(c) for c in found)


@pytest.mark.parametrize(
    ("statement", "expected"),
    [
        ("from . import api", "app.web.api"),
        ("from .forms import FormInput", "app.web.forms"),
        ("from ..store import corpora", "app.store.corpora"),
        ("from ..services.corpora import lookup", "app.services.corpora"),
        ("def f():\n    from app.store.tables import Corpus", "app.store.tables"),
    ],
)
def test_imports_resolve_to_project_modules(statement: str, expected: str) -> None:
    """Relative imports resolve against the module's package, ``from package import module`` names the
    module, and an import inside a function counts."""
    assert imported_names("app.web.pages", statement) == {expected}
