"""Sign-in attempts are counted before the password is checked, atomically, on SQLite and PostgreSQL."""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from threading import Barrier

from sqlalchemy import select
from sqlmodel import Session

from app.store import signins
from app.store.tables import SignInFailures

ALLOWANCE = signins.Allowance(pair=5, address=20)
GUESSES = 30


def counts(engine) -> dict[str, int]:
    with Session(engine) as session:
        return {row.key: row.failures for row in session.execute(select(SignInFailures)).scalars()}


def test_parallel_attempts_see_each_other(engine):
    # 30 guesses of one name from one address at the same moment: each is counted before any password is
    # checked, so exactly the pair's free attempts are let through and every attempt is in the count.
    start = Barrier(GUESSES)

    def guess(_: int) -> float:
        start.wait()
        return signins.attempt(engine, "cleo", "198.51.100.7", ALLOWANCE)

    with ThreadPoolExecutor(GUESSES) as pool:
        waits = list(pool.map(guess, range(GUESSES)))
    assert sum(wait == 0 for wait in waits) == ALLOWANCE.pair
    assert all(wait > 0 for wait in sorted(waits)[ALLOWANCE.pair :])
    assert counts(engine) == {"pair cleo 198.51.100.7": GUESSES, "address 198.51.100.7": GUESSES}


def test_a_right_password_clears_its_pair_and_is_taken_back_from_the_address(engine):
    for _ in range(3):
        assert signins.attempt(engine, "ben", "192.0.2.1", ALLOWANCE) == 0
    assert signins.attempt(engine, "ada", "192.0.2.1", ALLOWANCE) == 0
    signins.succeeded(engine, "ada", "192.0.2.1")
    assert counts(engine) == {"pair ben 192.0.2.1": 3, "address 192.0.2.1": 3}
    # members behind one address sign in all day long without using up the address's allowance
    for _ in range(ALLOWANCE.address + 5):
        assert signins.attempt(engine, "ada", "192.0.2.1", ALLOWANCE) == 0
        signins.succeeded(engine, "ada", "192.0.2.1")
    assert counts(engine) == {"pair ben 192.0.2.1": 3, "address 192.0.2.1": 3}
