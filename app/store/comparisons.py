"""Saved comparisons (permalinks): corpora, settings and a snapshot of the numbers shown, under a random slug."""

from __future__ import annotations

import json
import secrets
from typing import Any

from sqlalchemy import delete, select
from sqlalchemy.engine import Engine
from sqlmodel import Session

from app.store.db import transaction
from app.store.tables import SavedComparison

SLUG_BYTES = 12  # 96 random bits, 16 URL-safe characters


class ComparisonNotFoundError(LookupError):
    def __init__(self, slug: str) -> None:
        super().__init__(f"no saved comparison {slug!r}")
        self.slug = slug


def new_slug() -> str:
    """An unguessable slug: ``SLUG_BYTES`` bytes from the operating system's CSPRNG, base64url-encoded."""
    return secrets.token_urlsafe(SLUG_BYTES)


def save_comparison(
    engine: Engine,
    corpus_ids: list[int],
    settings: dict[str, Any],
    snapshot: dict[str, Any],
    program_version: str,
    creator_id: int | None = None,
    corpora: list[dict[str, Any]] | None = None,
    public: bool = False,
) -> SavedComparison:
    """Store a comparison under a fresh slug and return the stored row (``creator_id``: the lab member who
    saved it; ``corpora``: each corpus as it was when saved; ``public``: visible without signing in)."""
    row = SavedComparison(
        slug=new_slug(),
        corpus_ids_json=json.dumps(corpus_ids),
        settings_json=json.dumps(settings),
        snapshot_json=json.dumps(snapshot, ensure_ascii=False, allow_nan=False),
        program_version=program_version,
        creator_id=creator_id,
        corpora_json=None if corpora is None else json.dumps(corpora),
        public=public,
    )
    with transaction(engine) as session:
        session.add(row)
        session.flush()
        session.refresh(row)
        session.expunge(row)
    return row


def is_public(engine: Engine, slug: str) -> bool:
    """Whether the comparison at ``slug`` exists and its creator made it public (its snapshot is not read)."""
    with Session(engine) as session:
        found = session.execute(select(SavedComparison.public).where(SavedComparison.slug == slug)).scalar()
        return bool(found)


def get_comparison(engine: Engine, slug: str) -> SavedComparison:
    with Session(engine) as session:
        row = session.get(SavedComparison, slug)
        if row is None:
            raise ComparisonNotFoundError(slug)
        return row


def creator_of(engine: Engine, slug: str) -> int | None:
    """The lab member who saved the comparison (None when saved outside lab mode); ComparisonNotFoundError."""
    return get_comparison(engine, slug).creator_id


def list_comparisons(engine: Engine) -> list[SavedComparison]:
    """Every saved comparison, newest first."""
    with Session(engine) as session:
        rows = session.execute(select(SavedComparison).order_by(SavedComparison.created_at.desc())).scalars()
        return list(rows)


def set_public(engine: Engine, slug: str, public: bool) -> None:
    with transaction(engine) as session:
        row = session.get(SavedComparison, slug)
        if row is None:
            raise ComparisonNotFoundError(slug)
        row.public = public


def delete_comparison(engine: Engine, slug: str) -> None:
    """Delete the comparison saved at ``slug`` (ComparisonNotFoundError when there is none)."""
    with transaction(engine) as session:
        if session.execute(delete(SavedComparison).where(SavedComparison.slug == slug)).rowcount != 1:
            raise ComparisonNotFoundError(slug)
