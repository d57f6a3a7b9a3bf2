"""Lab members: accounts with scrypt password hashes, API tokens kept as SHA-256 digests, corpus ownership.

Passwords: scrypt (RFC 7914) with N = 2^14, r = 8, p = 1 (the interactive-login setting of Percival's scrypt
paper, 2009) and a random 16-byte salt per password; the stored form is
``scrypt$N$r$p$<salt>$<key>`` (base64), so the parameters can be raised later without breaking old hashes.
Checks compare in constant time (``hmac.compare_digest``). A password is never stored, logged or echoed.

API tokens: 32 random bytes from the operating system (``secrets``), shown once; the store keeps only their
SHA-256, which is enough for a random 256-bit secret (no salt or slow hash is needed: it cannot be guessed).
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import re
import secrets
from dataclasses import dataclass
from functools import lru_cache

from sqlalchemy import delete, exists, func, select, update
from sqlalchemy.engine import Engine
from sqlalchemy.exc import IntegrityError
from sqlmodel import Session

from app.store.db import transaction
from app.store.tables import Account, ApiToken, Corpus, LabSession

SCRYPT_N, SCRYPT_R, SCRYPT_P = 2**14, 8, 1
SALT_BYTES = 16
KEY_BYTES = 32
SCRYPT_MAXMEM = 64 * 1024 * 1024  # 128 * r * N = 16 MiB is needed; OpenSSL's default cap is 32 MiB
MIN_PASSWORD, MAX_PASSWORD = 8, 1024
NAME_PATTERN = re.compile(r"[A-Za-z0-9][A-Za-z0-9._-]{0,63}")
TOKEN_PREFIX = "lxg_"
TOKEN_BYTES = 32


class AccountError(ValueError):
    """A name or password that cannot be used; the message says why."""


@dataclass(frozen=True)
class Member:
    """A signed-in lab member, as pages and routes see them."""

    id: int
    name: str
    is_admin: bool
    # A short digest of the stored password hash: sessions made before a password change stop working.
    password_stamp: str


def _b64(data: bytes) -> str:
    return base64.b64encode(data).decode("ascii")


def hash_password(password: str) -> str:
    """``scrypt$N$r$p$salt$key`` for a new random salt."""
    salt = secrets.token_bytes(SALT_BYTES)
    key = hashlib.scrypt(
        password.encode("utf-8"),
        salt=salt,
        n=SCRYPT_N,
        r=SCRYPT_R,
        p=SCRYPT_P,
        maxmem=SCRYPT_MAXMEM,
        dklen=KEY_BYTES,
    )
    return f"scrypt${SCRYPT_N}${SCRYPT_R}${SCRYPT_P}${_b64(salt)}${_b64(key)}"


def verify_password(password: str, stored: str) -> bool:
    """Whether ``password`` gives the stored scrypt key (constant-time comparison); False for a malformed hash."""
    try:
        scheme, n, r, p, salt, key = stored.split("$")
        if scheme != "scrypt":
            return False
        expected = base64.b64decode(key, validate=True)
        computed = hashlib.scrypt(
            password.encode("utf-8"),
            salt=base64.b64decode(salt, validate=True),
            n=int(n),
            r=int(r),
            p=int(p),
            maxmem=SCRYPT_MAXMEM,
            dklen=len(expected),
        )
    except (ValueError, TypeError):
        return False
    return hmac.compare_digest(computed, expected)


@lru_cache(maxsize=1)
def _dummy_hash() -> str:
    """Checked when the name is unknown, so that a wrong name costs as long as a wrong password."""
    return hash_password(secrets.token_urlsafe(16))


def check_name(name: str) -> str:
    if not NAME_PATTERN.fullmatch(name):
        raise AccountError("name: 1 to 64 letters, digits, '.', '_' or '-', starting with a letter or digit")
    return name


def check_password(password: str) -> str:
    if not MIN_PASSWORD <= len(password) <= MAX_PASSWORD:
        raise AccountError(f"password: between {MIN_PASSWORD} and {MAX_PASSWORD} characters")
    return password


def member_from_account(account: Account) -> Member:
    stamp = hashlib.sha256(account.password_hash.encode("ascii")).hexdigest()[:16]
    return Member(int(account.id), account.name, bool(account.is_admin), stamp)


def add_account(engine: Engine, name: str, password: str, is_admin: bool = False) -> Member:
    """Create an account; AccountError for a bad or taken name or a bad password."""
    account = Account(
        name=check_name(name), password_hash=hash_password(check_password(password)), is_admin=is_admin
    )
    try:
        with transaction(engine) as session:
            session.add(account)
            session.flush()
            return member_from_account(account)
    except IntegrityError as exc:
        raise AccountError(f"name: there is already an account called {name!r}") from exc


@dataclass(frozen=True)
class PasswordChange:
    """What a password change did besides: sessions ended, API tokens revoked and API tokens kept."""

    sessions_ended: int
    tokens_revoked: int
    tokens_kept: int


def set_password(engine: Engine, name: str, password: str, revoke_tokens: bool = False) -> PasswordChange:
    """Replace the password of ``name``, end every session of the member and, when asked, revoke their API
    tokens, in one transaction; AccountError for an unknown name."""
    new_hash = hash_password(check_password(password))
    with transaction(engine) as session:
        account_id = session.execute(select(Account.id).where(Account.name == name)).scalar_one_or_none()
        if account_id is None:
            raise AccountError(f"no account called {name!r}")
        session.execute(update(Account).where(Account.id == account_id).values(password_hash=new_hash))
        ended = session.execute(delete(LabSession).where(LabSession.account_id == account_id)).rowcount
        tokens = delete(ApiToken).where(ApiToken.account_id == account_id)
        revoked = session.execute(tokens).rowcount if revoke_tokens else 0
        kept = session.execute(
            select(func.count()).select_from(ApiToken).where(ApiToken.account_id == account_id)
        ).scalar_one()
        return PasswordChange(ended, revoked, int(kept))


def any_account(engine: Engine) -> bool:
    with Session(engine) as session:
        return bool(session.execute(select(exists().select_from(Account))).scalar())


def list_accounts(engine: Engine) -> list[tuple[Member, int]]:
    """Every member with their number of API tokens, in the order they were added."""
    with Session(engine) as session:
        tokens = select(ApiToken.account_id, func.count().label("n")).group_by(ApiToken.account_id).subquery()
        rows = session.execute(
            select(Account, func.coalesce(tokens.c.n, 0))
            .outerjoin(tokens, tokens.c.account_id == Account.id)
            .order_by(Account.id)
        )
        return [(member_from_account(account), int(n)) for account, n in rows]


def member_exists(engine: Engine, name: str) -> bool:
    with Session(engine) as session:
        return bool(session.execute(select(exists().where(Account.name == name))).scalar())


def member_by_id(engine: Engine, account_id: int) -> Member | None:
    with Session(engine) as session:
        account = session.get(Account, account_id)
        return member_from_account(account) if account else None


def authenticate(engine: Engine, name: str, password: str) -> Member | None:
    """The member when name and password match, else None (as slow for an unknown name as for a known one)."""
    with Session(engine) as session:
        account = session.execute(select(Account).where(Account.name == name)).scalar_one_or_none()
    if account is None:
        verify_password(password, _dummy_hash())
        return None
    return member_from_account(account) if verify_password(password, account.password_hash) else None


def _token_digest(token: str) -> str:
    return hashlib.sha256(token.encode("utf-8")).hexdigest()


def new_token(engine: Engine, name: str) -> str:
    """A new API token for ``name``, returned once (only its digest is stored); AccountError for an unknown name."""
    token = TOKEN_PREFIX + secrets.token_urlsafe(TOKEN_BYTES)
    with transaction(engine) as session:
        account = session.execute(select(Account).where(Account.name == name)).scalar_one_or_none()
        if account is None:
            raise AccountError(f"no account called {name!r}")
        session.add(ApiToken(account_id=account.id, token_hash=_token_digest(token)))
    return token


def revoke_tokens(engine: Engine, name: str) -> int:
    """Delete every API token of ``name``; returns how many there were."""
    with transaction(engine) as session:
        account_id = session.execute(select(Account.id).where(Account.name == name)).scalar_one_or_none()
        if account_id is None:
            raise AccountError(f"no account called {name!r}")
        return session.execute(delete(ApiToken).where(ApiToken.account_id == account_id)).rowcount


def member_by_token(engine: Engine, token: str) -> Member | None:
    """The member an API token belongs to, or None (the digest is looked up, never the token itself)."""
    with Session(engine) as session:
        account = session.execute(
            select(Account)
            .join(ApiToken, ApiToken.account_id == Account.id)
            .where(ApiToken.token_hash == _token_digest(token))
        ).scalar_one_or_none()
        return member_from_account(account) if account else None


def set_corpus_owner(engine: Engine, corpus_id: int, account_id: int) -> None:
    with transaction(engine) as session:
        session.execute(update(Corpus).where(Corpus.id == corpus_id).values(owner_id=account_id))
