"""Lab sessions in the store: the browser holds a random session id, the store its SHA-256 (like API tokens,
a random 256-bit secret needs no salt or slow hash). A session ends when its row is deleted: at sign-out,
when the member's password changes, or when it expires; every server process sees that at once.
"""

from __future__ import annotations

import hashlib
import secrets
from datetime import UTC, datetime, timedelta

from sqlalchemy import delete, select
from sqlalchemy.engine import Engine
from sqlmodel import Session

from app.store.accounts import Member, member_from_account
from app.store.db import transaction
from app.store.tables import Account, LabSession

SESSION_BYTES = 32


def _digest(session_id: str) -> str:
    return hashlib.sha256(session_id.encode("utf-8")).hexdigest()


def start(engine: Engine, account_id: int, lifetime: timedelta) -> str:
    """A new session for the account; returns its id (only its digest is stored). Expired sessions of
    every member are removed on the way."""
    session_id = secrets.token_urlsafe(SESSION_BYTES)
    now = datetime.now(UTC)
    with transaction(engine) as session:
        session.execute(delete(LabSession).where(LabSession.expires_at <= now))
        session.add(LabSession(id_hash=_digest(session_id), account_id=account_id, expires_at=now + lifetime))
    return session_id


def member_of(engine: Engine, session_id: str) -> Member | None:
    """The member signed in with this session id, or None (unknown, ended or expired)."""
    with Session(engine) as session:
        account = session.execute(
            select(Account)
            .join(LabSession, LabSession.account_id == Account.id)
            .where(LabSession.id_hash == _digest(session_id), LabSession.expires_at > datetime.now(UTC))
        ).scalar_one_or_none()
        return member_from_account(account) if account else None


def end(engine: Engine, session_id: str) -> None:
    with transaction(engine) as session:
        session.execute(delete(LabSession).where(LabSession.id_hash == _digest(session_id)))


def count_for(engine: Engine, account_id: int) -> int:
    with Session(engine) as session:
        return len(
            session.execute(select(LabSession.id_hash).where(LabSession.account_id == account_id)).all()
        )
