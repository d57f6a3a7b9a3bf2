"""In-process apps for the fuzz tests: OpenAPI documents of the JSON API and of the pages, and a small
store that every test gets a fresh copy of."""

from __future__ import annotations

import copy
import importlib
import pkgutil
import sqlite3
import tempfile
from collections.abc import Iterator
from contextlib import closing, contextmanager
from dataclasses import dataclass
from pathlib import Path

from fastapi import APIRouter, FastAPI
from fastapi.openapi.utils import get_openapi
from fastapi.routing import APIRoute
from fastapi.testclient import TestClient

import app.web
from app.config import Settings
from app.main import create_app

# The SQLite file inside the data directory (Settings.resolved_database_url).
STORE_FILE = "lexigrowth.sqlite3"


@contextmanager
def throwaway_app() -> Iterator[FastAPI]:
    """An app on a temporary store that is deleted when the block ends (for its routes and documents)."""
    with tempfile.TemporaryDirectory() as data_dir:
        application = create_app(Settings(data_dir=Path(data_dir), load_demo=False))
        try:
            yield application
        finally:
            application.state.engine.dispose()


def api_document() -> dict:
    """The app's own OpenAPI document (``/openapi.json``)."""
    with throwaway_app() as application:
        return application.openapi()


def pages_document() -> dict:
    """An OpenAPI document of the routes the app leaves out of its own (``include_in_schema=False``): the
    HTML pages and forms of every router in ``app.web``, described by FastAPI's ``get_openapi`` from copies
    of the routes marked for inclusion. The routes themselves are not changed."""
    routes = []
    for info in pkgutil.iter_modules(app.web.__path__):
        router = getattr(importlib.import_module(f"app.web.{info.name}"), "router", None)
        if isinstance(router, APIRouter):
            for route in router.routes:
                if isinstance(route, APIRoute) and not route.include_in_schema:
                    visible = copy.copy(route)
                    visible.include_in_schema = True
                    routes.append(visible)
    return get_openapi(title="Lexigrowth pages", version="0", openapi_version="3.1.0", routes=routes)


@dataclass(frozen=True)
class TemplateStore:
    """A store file and what it holds: the ids of its corpora and the slug of its saved comparison."""

    path: Path
    corpora: tuple[int, ...]
    slug: str


def build_template_store(data_dir: Path, texts: dict[str, str]) -> TemplateStore:
    """Upload ``texts`` (name -> text) through the JSON API, then save a comparison of them all."""
    with TestClient(create_app(Settings(data_dir=data_dir, load_demo=False))) as client:
        ids = []
        for name, text in texts.items():
            created = client.post(
                "/api/corpora?wait=1",
                data={"name": name, "labels": f"part={name}"},
                files={"files": (f"{name}.txt", text.encode("utf-8"))},
            )
            assert created.status_code == 201, created.text
            ids.append(created.json()["id"])
        saved = client.post("/api/comparisons", json={"corpora": ids})
        assert saved.status_code == 201, saved.text
        client.app.state.engine.dispose()
    return TemplateStore(data_dir / STORE_FILE, tuple(ids), saved.json()["slug"])


def app_on_copy(template: TemplateStore, data_dir: Path, **settings) -> FastAPI:
    """An app on a copy of the template store, made with SQLite's online backup API (a consistent copy of
    the committed pages, those still in the write-ahead log included)."""
    data_dir.mkdir(parents=True)
    with (
        closing(sqlite3.connect(template.path)) as source,
        closing(sqlite3.connect(data_dir / STORE_FILE)) as target,
    ):
        source.backup(target)
    return create_app(Settings(data_dir=data_dir, load_demo=False, **settings))
