"""Results kept in this process's memory, least recently used dropped first.

For views that are pure functions of stored data: the caller puts in the key everything the result
depends on (the store's address, the program version, each corpus's identity and the stamp of its model
report, the settings), so an entry is never stale, only unused. Each server process keeps its own.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Callable, Hashable
from typing import Generic, TypeVar

Result = TypeVar("Result")


class _Computation:
    """A result being computed by one thread, that the others asking for the same key wait for."""

    def __init__(self) -> None:
        self.done = threading.Event()
        self.succeeded = False
        self.result: object = None


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
        with self._lock:
            if key in self._results:
                self._results.move_to_end(key)
                return self._results[key]
            running = self._running.get(key)
            if running is None:
                mine = self._running[key] = _Computation()
        if running is not None:
            running.done.wait()
            if running.succeeded:
                return running.result  # type: ignore[return-value]
            return self.get(key, compute)  # it failed: ask again (one of the waiting requests computes)
        try:
            result = compute()
            mine.result, mine.succeeded = result, True
            with self._lock:
                self._results[key] = result
                while len(self._results) > self.size:
                    self._results.popitem(last=False)
            return result
        finally:
            with self._lock:
                del self._running[key]
            mine.done.set()
