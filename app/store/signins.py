"""Sign-in attempts counted in the store before the password is checked, so that every server process
and every parallel request sees the same counts.

Keys are ``pair <name> <address>`` (one name tried from one address) and ``address <address>`` (every
name tried from one address). A key's first ``free`` attempts cost nothing; after that each further
attempt must wait ``BASE_DELAY * 2^(attempts - free)`` seconds after the last one, at most
``MAX_DELAY`` (exponential back-off: OWASP Authentication Cheat Sheet, "Protect against automated
attacks"). A key is forgotten ``FORGET_AFTER`` after its last attempt, and a successful sign-in clears
its pair and takes itself back from its address's count. Nothing is counted per name alone: guessing a
member's password from elsewhere never locks the member out of their own address.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

from sqlalchemy import delete, or_, select, update
from sqlalchemy.dialects.postgresql import insert as postgresql_insert
from sqlalchemy.dialects.sqlite import insert as sqlite_insert
from sqlalchemy.engine import Engine

from app.store.db import transaction
from app.store.tables import SignInFailures

BASE_DELAY = timedelta(seconds=2)
MAX_DELAY = timedelta(minutes=15)
FORGET_AFTER = timedelta(days=1)


@dataclass(frozen=True)
class Allowance:
    """Attempts that cost nothing, per kind of key."""

    pair: int = 5
    address: int = 20


def _keys(name: str, address: str) -> dict[str, str]:
    folded = name.strip().casefold()
    return {"pair": f"pair {folded} {address}", "address": f"address {address}"}


def delay(failures: int, free: int) -> timedelta:
    """How long after the last attempt the next one must wait, ``failures`` attempts being counted."""
    if failures < free:
        return timedelta(0)
    return min(BASE_DELAY * 2 ** min(failures - free, 30), MAX_DELAY)


def attempt(
    engine: Engine, name: str, address: str, allowance: Allowance, now: datetime | None = None
) -> float:
    """Count one sign-in attempt of ``name`` from ``address`` before its password is checked; the seconds
    it must still wait (0: check the password; more: refuse it unchecked).

    Every attempt counts, refused ones too, so that guesses sent in parallel see each other: each key's row
    is made if missing, then locked (``INSERT ... ON CONFLICT DO NOTHING`` takes SQLite's write lock for the
    whole transaction; ``SELECT ... FOR UPDATE`` the row's lock on PostgreSQL), read and incremented in one
    transaction, keys in a fixed order so that two attempts never wait for each other's second key. The
    wait comes from the counts before this attempt. A right password then undoes its count
    (``succeeded``)."""
    now = now or datetime.now(UTC)
    with transaction(engine) as session:  # forgotten keys go, so the table holds at most a day of attempts
        session.execute(delete(SignInFailures).where(SignInFailures.last_failure_at <= now - FORGET_AFTER))
    insert = postgresql_insert if engine.dialect.name == "postgresql" else sqlite_insert
    waits = [0.0]
    with transaction(engine) as session:
        for kind, key in sorted(_keys(name, address).items(), key=lambda item: item[1]):
            session.execute(
                insert(SignInFailures)
                .values(key=key, failures=0, last_failure_at=now)
                .on_conflict_do_nothing(index_elements=["key"])
            )
            row = session.execute(
                select(SignInFailures).where(SignInFailures.key == key).with_for_update()
            ).scalar_one()
            fresh = now - row.last_failure_at < FORGET_AFTER
            wait = delay(row.failures, getattr(allowance, kind)) if fresh else timedelta(0)
            if wait:  # (a parallel attempt may have stamped a moment later than this one's ``now``)
                waits.append((row.last_failure_at + wait - now).total_seconds())
            row.failures = row.failures + 1 if fresh else 1
            row.last_failure_at = max(row.last_failure_at, now) if fresh else now
    return max(waits)


def succeeded(engine: Engine, name: str, address: str) -> None:
    """A right password: the attempts of this name from this address are forgotten, and this attempt is
    taken back from the address's count (a lab behind one address signs in many times a day)."""
    keys = _keys(name, address)
    with transaction(engine) as session:
        session.execute(delete(SignInFailures).where(SignInFailures.key == keys["pair"]))
        session.execute(
            update(SignInFailures)
            .where(SignInFailures.key == keys["address"], SignInFailures.failures > 0)
            .values(failures=SignInFailures.failures - 1)
        )


def clear(engine: Engine, name: str | None = None, address: str | None = None) -> int:
    """Forget the failures of a name (from every address), of an address, or of everything; how many
    keys were forgotten."""
    conditions = []
    if name is not None:
        conditions.append(SignInFailures.key.like(f"pair {name.strip().casefold()} %"))
    if address is not None:
        conditions += [
            SignInFailures.key == f"address {address}",
            SignInFailures.key.like(f"pair % {address}"),
        ]
    with transaction(engine) as session:
        statement = delete(SignInFailures)
        if conditions:
            statement = statement.where(or_(*conditions))
        return session.execute(statement).rowcount
