"""Results kept in memory: each computed once even when many requests ask at the same moment."""

from __future__ import annotations

import threading
import time
from concurrent.futures import ThreadPoolExecutor

import pytest

from app.services import memo
from app.services.memo import ClientGone, RecentResults


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


class Client:
    """A request's client as the memo sees it: gone once ``leave`` is called."""

    def __init__(self) -> None:
        self.left = threading.Event()

    def leave(self) -> None:
        self.left.set()

    def gone(self) -> bool:
        return self.left.is_set()


def ask(results: RecentResults, key: str, compute, client: Client):
    with memo.for_client(client.gone):
        return results.get(key, compute)


def test_a_request_whose_client_has_gone_does_not_start_its_computation():
    results: RecentResults[int] = RecentResults(4)
    calls = []
    client = Client()
    client.leave()
    with pytest.raises(ClientGone):
        ask(results, "page", lambda: calls.append(1) or 1, client)
    assert calls == []
    assert ask(results, "page", lambda: calls.append(1) or 2, Client()) == 2  # nothing was kept
    assert calls == [1]


def sectioned(started: threading.Event, release: threading.Event, sections: list[str]):
    """A computation of two sections with a checkpoint between them (as a page's context is built)."""

    def compute() -> int:
        sections.append("first")
        started.set()
        release.wait(10)
        memo.checkpoint()
        sections.append("second")
        return 42

    return compute


def two_requests_for_one_page(pool: ThreadPoolExecutor, sections: list[str]):
    """The first request starts the page's sectioned computation, a second one waits for it; (first
    client, second client, release, first's future, second's future)."""
    results: RecentResults[int] = RecentResults(4)
    started, release = threading.Event(), threading.Event()
    first, second = Client(), Client()
    computing = pool.submit(ask, results, "page", sectioned(started, release, sections), first)
    assert started.wait(10)
    waiting = pool.submit(ask, results, "page", sectioned(started, release, sections), second)
    return results, first, second, release, computing, waiting


def test_a_shared_computation_is_abandoned_when_all_its_requests_have_gone():
    sections: list[str] = []
    with ThreadPoolExecutor(2) as pool:
        results, first, second, release, computing, waiting = two_requests_for_one_page(pool, sections)
        second.leave()
        with pytest.raises(ClientGone):  # the waiting request stops waiting without the result
            waiting.result(timeout=memo.WAIT_SLICE * 4)
        first.leave()
        release.set()
        with pytest.raises(ClientGone):
            computing.result(timeout=10)
    assert sections == ["first"]  # the second section was not computed for nobody
    assert ask(results, "page", lambda: 7, Client()) == 7  # and nothing was kept


def test_a_shared_computation_goes_on_while_one_of_its_requests_waits():
    sections: list[str] = []
    with ThreadPoolExecutor(2) as pool:
        _, first, _, release, computing, waiting = two_requests_for_one_page(pool, sections)
        time.sleep(0.1)  # the second request waits for the first one's computation
        first.leave()
        release.set()
        assert waiting.result(timeout=10) == 42
        assert computing.result(timeout=10) == 42  # the request that left gets it too (nobody reads it)
    assert sections == ["first", "second"]
