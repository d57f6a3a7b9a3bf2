"""Shared request dependencies and error mapping for pages and the JSON API."""

from __future__ import annotations

from fastapi import HTTPException, Request
from sqlalchemy.engine import Engine

from app.config import Settings
from app.services import corpora
from app.services.jobs import Dispatcher
from app.web.uploads import UploadTooLargeError


def engine_of(request: Request) -> Engine:
    return request.app.state.engine


def settings_of(request: Request) -> Settings:
    return request.app.state.settings


def jobs_of(request: Request) -> Dispatcher:
    return request.app.state.jobs


def corpus_or_404(engine: Engine, corpus_id: int) -> corpora.StoredCorpus:
    try:
        return corpora.lookup(engine, corpus_id)
    except corpora.CorpusNotFoundError as exc:
        raise HTTPException(status_code=404, detail=str(exc)) from exc


def input_error(exc: Exception) -> HTTPException:
    """The HTTP error for input that cannot be ingested: 413 for size, 422 otherwise, with the reason."""
    return HTTPException(status_code=413 if isinstance(exc, UploadTooLargeError) else 422, detail=str(exc))
