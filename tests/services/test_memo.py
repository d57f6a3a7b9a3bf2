"""Results kept in memory: each computed once even when many requests ask at the same moment."""

from __future__ import annotations

import threading
from concurrent.futures import ThreadPoolExecutor

import pytest

from app.services.memo import RecentResults


def test_requests_for_a_key_being_computed_wait_for_that_one_computation():
    results: RecentResults[int] = RecentResults(4)
    started, release = threading.Event(), threading.Event()
    calls = []

    def slow() -> int:
        calls.append(1)
        started.set()
        release.wait(10)
        return 42

    with ThreadPoolExecutor(9) as pool:  # a thread left for the other key
        first = pool.submit(results.get, "page", slow)
        assert started.wait(10)
        others = [pool.submit(results.get, "page", slow) for _ in range(7)]
        # another key is computed at once, without waiting for the slow one
        assert pool.submit(results.get, "other", lambda: 7).result(timeout=5) == 7
        release.set()
        assert first.result(timeout=10) == 42
        assert [f.result(timeout=10) for f in others] == [42] * 7
    assert len(calls) == 1


def test_a_failed_computation_is_not_kept_and_waiting_requests_compute_for_themselves():
    results: RecentResults[int] = RecentResults(4)
    started, release = threading.Event(), threading.Event()
    outcomes = iter([ValueError("no such corpus"), 5])

    def flaky() -> int:
        started.set()
        release.wait(10)
        outcome = next(outcomes)
        if isinstance(outcome, Exception):
            raise outcome
        return outcome

    with ThreadPoolExecutor(2) as pool:
        first = pool.submit(results.get, "page", flaky)
        assert started.wait(10)
        second = pool.submit(results.get, "page", flaky)
        release.set()
        with pytest.raises(ValueError, match="no such corpus"):
            first.result(timeout=10)
        assert second.result(timeout=10) == 5
    assert results.get("page", lambda: 99) == 5  # the success was kept


def test_the_least_recently_used_result_goes_first():
    results: RecentResults[str] = RecentResults(2)
    results.get("a", lambda: "A")
    results.get("b", lambda: "B")
    results.get("a", lambda: "unused")  # "a" used again: "b" is now the oldest
    results.get("c", lambda: "C")
    assert results.get("a", lambda: "recomputed") == "A"
    assert results.get("b", lambda: "recomputed") == "recomputed"
