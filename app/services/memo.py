"""Results kept in this process's memory, least recently used dropped first.

For views that are pure functions of stored data: the caller puts in the key everything the result
depends on (the store's address, the program version, each corpus's identity and the stamp of its model
report, the settings), so an entry is never stale, only unused. Each server process keeps its own.

Nobody's computation is not run: a request says how to tell that its client has gone (``for_client``);
a computation is not started for a request already given up, a request that waits for another's
computation stops waiting when its client goes, and a computation checks between its sections
(``checkpoint``) that someone still waits for it, and is abandoned (``ClientGone``) when all have gone.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Callable, Hashable, Iterable, Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from typing import Generic, TypeVar

Result = TypeVar("Result")
Item = TypeVar("Item")
Gone = Callable[[], bool]
"""Whether whoever asked has gone (its client disconnected)."""
WAIT_SLICE = 0.5
"""Seconds between two looks of a waiting request at its own client."""

_asker: ContextVar[Gone | None] = ContextVar("lexigrowth_asker", default=None)
"""Who this thread works for now: a request's client, or the computation under way (nested results)."""


class ClientGone(Exception):
    """Everyone who asked for this result has gone: it is not computed (any further)."""


@contextmanager
def for_client(gone: Gone) -> Iterator[None]:
    """Results asked for in this block are for a client that has gone when ``gone()`` says so."""
    token = _asker.set(gone)
    try:
        yield
    finally:
        _asker.reset(token)


def checkpoint() -> None:
    """Between two sections of a computation: raise ``ClientGone`` when nobody waits for it any more."""
    gone = _asker.get()
    if gone is not None and gone():
        raise ClientGone


def checked(items: Iterable[Item]) -> Iterator[Item]:
    """``items``, with a ``checkpoint`` before each (a computation of many similar sections)."""
    for item in items:
        checkpoint()
        yield item


class _Computation:
    """A result being computed by one thread, that the others asking for the same key wait for; it is
    abandoned when every asker (the computing one included) has gone."""

    def __init__(self) -> None:
        self.done = threading.Event()
        self.succeeded = False
        self.result: object = None
        self.askers: list[Gone | None] = []  # None: an asker that cannot go (a command, a test)

    def abandoned(self) -> bool:
        return all(gone is not None and gone() for gone in list(self.askers))


class RecentResults(Generic[Result]):
    """At most ``size`` results by key, each computed once: requests that ask for a key while its result
    is being computed wait for that computation instead of repeating it (many users opening the same new
    page at once cost one computation, not one each). Only requests for the same key wait: a slow view
    never holds up another. A computation that raises is not kept; the requests that waited for it ask
    again, so one of them computes (and each gets its own error or the result)."""

    def __init__(self, size: int) -> None:
        self.size = size
        self._results: OrderedDict[Hashable, Result] = OrderedDict()
        self._running: dict[Hashable, _Computation] = {}
        self._lock = threading.Lock()

    def get(self, key: Hashable, compute: Callable[[], Result]) -> Result:
        """The kept result of ``key``, or the one being computed, or ``compute()`` now; raises
        ``ClientGone`` (nothing kept) when the asker's client has gone (see the module's docstring)."""
        asker = _asker.get()
        if key not in self._results and asker is not None and asker():
            raise ClientGone  # given up before: neither computed nor waited for (looked at outside the lock)
        with self._lock:
            if key in self._results:
                self._results.move_to_end(key)
                return self._results[key]
            running = self._running.get(key)
            if running is None:
                mine = self._running[key] = _Computation()
            (running or mine).askers.append(asker)
        if running is not None:
            try:
                while not running.done.wait(WAIT_SLICE):
                    if asker is not None and asker():
                        raise ClientGone
            finally:
                with self._lock:
                    running.askers.remove(asker)
            if running.succeeded:
                return running.result  # type: ignore[return-value]
            return self.get(key, compute)  # it failed: ask again (one of the waiting requests computes)
        token = _asker.set(mine.abandoned)  # nested results and checkpoints ask whether anyone still waits
        try:
            result = compute()
            mine.result, mine.succeeded = result, True
            with self._lock:
                self._results[key] = result
                while len(self._results) > self.size:
                    self._results.popitem(last=False)
            return result
        finally:
            _asker.reset(token)
            with self._lock:
                del self._running[key]
            mine.done.set()
