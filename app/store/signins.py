"""Failed sign-ins counted in the store, so that every server process sees the same counts.

Keys are ``pair <name> <address>`` (one name tried from one address) and ``address <address>`` (every
name tried from one address). A key's first ``free`` failures cost nothing; after that each further
attempt must wait ``BASE_DELAY * 2^(failures - free)`` seconds after the last failure, at most
``MAX_DELAY`` (exponential back-off: OWASP Authentication Cheat Sheet, "Protect against automated
attacks"). A key is forgotten ``FORGET_AFTER`` after its last failure, and a successful sign-in clears
its pair. Nothing is counted per name alone: guessing a member's password from elsewhere never locks the
member out of their own address.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

from sqlalchemy import delete, or_, select
from sqlalchemy.engine import Engine
from sqlalchemy.exc import IntegrityError
from sqlmodel import Session

from app.store.db import transaction
from app.store.tables import SignInFailures

BASE_DELAY = timedelta(seconds=2)
MAX_DELAY = timedelta(minutes=15)
FORGET_AFTER = timedelta(days=1)


@dataclass(frozen=True)
class Allowance:
    """Failures that cost nothing, per kind of key."""

    pair: int = 5
    address: int = 20


def _keys(name: str, address: str) -> dict[str, str]:
    folded = name.strip().casefold()
    return {"pair": f"pair {folded} {address}", "address": f"address {address}"}


def delay(failures: int, free: int) -> timedelta:
    """How long after the last failure the next attempt must wait."""
    if failures < free:
        return timedelta(0)
    return min(BASE_DELAY * 2 ** min(failures - free, 30), MAX_DELAY)


def wait_seconds(
    engine: Engine, name: str, address: str, allowance: Allowance, now: datetime | None = None
) -> float:
    """Seconds until ``name`` may try to sign in from ``address`` again (0 when it may now)."""
    now = now or datetime.now(UTC)
    keys = _keys(name, address)
    with Session(engine) as session:
        rows = session.execute(select(SignInFailures).where(SignInFailures.key.in_(keys.values()))).scalars()
        by_key = {row.key: row for row in rows}
    waits = [0.0]
    for kind, key in keys.items():
        row = by_key.get(key)
        if row is None or now - row.last_failure_at >= FORGET_AFTER:
            continue
        until = row.last_failure_at + delay(row.failures, getattr(allowance, kind))
        waits.append((until - now).total_seconds())
    return max(waits)


def failed(engine: Engine, name: str, address: str, now: datetime | None = None) -> None:
    """Count one failed sign-in of ``name`` from ``address``."""
    now = now or datetime.now(UTC)
    with transaction(engine) as session:  # forgotten keys go, so the table holds at most a day of failures
        session.execute(delete(SignInFailures).where(SignInFailures.last_failure_at <= now - FORGET_AFTER))
    for key in _keys(name, address).values():
        for attempt in range(2):  # another process may insert the same key at the same moment
            try:
                with transaction(engine) as session:
                    row = session.get(SignInFailures, key, with_for_update=True)
                    if row is None:
                        session.add(SignInFailures(key=key, failures=1, last_failure_at=now))
                    else:
                        fresh = now - row.last_failure_at < FORGET_AFTER
                        row.failures = row.failures + 1 if fresh else 1
                        row.last_failure_at = now
                break
            except IntegrityError:
                if attempt:
                    raise


def succeeded(engine: Engine, name: str, address: str) -> None:
    """A right password: the failures of this name from this address are forgotten."""
    with transaction(engine) as session:
        session.execute(delete(SignInFailures).where(SignInFailures.key == _keys(name, address)["pair"]))


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
