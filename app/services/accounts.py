"""Accounts, sessions and sign-ins as the sign-in pages, the request guard and the command line ask for
them: members and their passwords and API tokens, the sessions of signed-in browsers, and the count of
failed sign-ins that slows down guessing.

The front door to ``app.store.accounts``, ``app.store.sessions`` and ``app.store.signins`` for the web
and the command line (they import no store module). Passwords are kept as scrypt hashes, tokens and
session ids as SHA-256 digests (see those modules)."""

from __future__ import annotations

from datetime import datetime, timedelta

from sqlalchemy.engine import Engine

from app.store import accounts as store
from app.store import sessions, signins

Member = store.Member
"""A lab member as pages and routes see them: id, name, whether an admin, and a stamp of their password."""

PasswordChange = store.PasswordChange
"""What a password change did besides: sessions ended, API tokens revoked, API tokens kept."""

AccountError = store.AccountError
"""A name or password that cannot be used, or an unknown member; the message says why."""

SignInAllowance = signins.Allowance
"""Failed sign-ins that cost no wait: per name and address pair, and per address."""

MAX_PASSWORD = store.MAX_PASSWORD
"""The longest password accepted (characters): a longer one is refused before it is hashed."""


def lab_mode_on(engine: Engine) -> bool:
    """Whether the store has any account: from the first one on, everyone signs in."""
    return store.any_account(engine)


def check_name(name: str) -> str:
    """A member name as given when it is one (letters, digits, ``._-``, at most 64); AccountError if not."""
    return store.check_name(name)


def add_member(engine: Engine, name: str, password: str, is_admin: bool = False) -> Member:
    """A new member with this password (AccountError for a name taken or a password too short)."""
    return store.add_account(engine, name, password, is_admin)


def members(engine: Engine) -> list[tuple[Member, int]]:
    """Every member with their number of API tokens, by id."""
    return store.list_accounts(engine)


def member_exists(engine: Engine, name: str) -> bool:
    return store.member_exists(engine, name)


def token_count(engine: Engine, member: Member) -> int:
    """How many API tokens the member has."""
    return next((n for m, n in store.list_accounts(engine) if m.id == member.id), 0)


def set_password(engine: Engine, name: str, password: str, revoke_tokens: bool = False) -> PasswordChange:
    """A new password: every session of the member ends; their API tokens are revoked when asked."""
    return store.set_password(engine, name, password, revoke_tokens=revoke_tokens)


def authenticate(engine: Engine, name: str, password: str) -> Member | None:
    """The member when the password is theirs, else None (in the same time either way)."""
    return store.authenticate(engine, name, password)


def member_by_id(engine: Engine, member_id: int) -> Member | None:
    return store.member_by_id(engine, member_id)


def member_by_token(engine: Engine, token: str) -> Member | None:
    """The member an API token belongs to, or None for an unknown or revoked one."""
    return store.member_by_token(engine, token)


def new_token(engine: Engine, name: str) -> str:
    """A new API token for the member (the store keeps only its digest: it is shown once)."""
    return store.new_token(engine, name)


def revoke_tokens(engine: Engine, name: str) -> int:
    """Delete every API token of the member; how many there were."""
    return store.revoke_tokens(engine, name)


def start_session(engine: Engine, member: Member, lifetime: timedelta) -> str:
    """A new session of the member lasting ``lifetime``; its id, for the signed cookie."""
    return sessions.start(engine, member.id, lifetime)


def session_member(engine: Engine, session_id: str) -> Member | None:
    """The member of a live session, or None (ended, expired, or made before a password change)."""
    return sessions.member_of(engine, session_id)


def end_session(engine: Engine, session_id: str) -> None:
    sessions.end(engine, session_id)


def sign_in_wait(
    engine: Engine, name: str, address: str, allowance: SignInAllowance, now: datetime | None = None
) -> float:
    """Count one sign-in attempt of ``name`` from ``address`` before its password is checked; the seconds
    it must still wait (0: check the password; more: refuse it unchecked)."""
    return signins.attempt(engine, name, address, allowance, now)


def sign_in_succeeded(engine: Engine, name: str, address: str) -> None:
    """A right password: the failed attempts of this name from this address are forgotten."""
    signins.succeeded(engine, name, address)


def forget_failed_sign_ins(engine: Engine, name: str | None = None, address: str | None = None) -> int:
    """Forget the failed sign-ins of a name, of an address, or all of them; how many keys were forgotten."""
    return signins.clear(engine, name, address)
