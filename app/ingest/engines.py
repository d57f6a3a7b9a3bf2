"""Engines that tokenize and count the pieces of a corpus: in this process, in local worker processes, or on
a Dask cluster.

``app.ingest.counting`` cuts the corpus into pieces at safe boundaries and merges the results in text
order; an engine only decides where ``count_piece`` runs. Every engine runs the same function on the same
pieces with the same tokenizer (``TokenizationProfile.tokenizer()``), so all engines give identical
results, down to the type-id sequence.

- ``serial``: in this process, one piece after the other.
- ``local``: a pool of worker processes (``concurrent.futures.ProcessPoolExecutor``, one per available
  core, started with "spawn" so it is safe from a threaded web server).
- ``dask``: the workers of a Dask cluster (``dask.distributed``, the optional "cluster" extra): an existing
  one given by its scheduler address, or a ``LocalCluster`` of worker processes started for the call. The
  pieces are read here and sent to the workers; only the per-piece results come back.

In both parallel engines at most ``IN_FLIGHT_PER_WORKER`` pieces per worker are submitted and not yet
merged, so memory stays bounded whatever the size of the corpus, and results are merged in submission
order.

Worker processes import this module to run ``count_piece``: keep its imports light (numpy, regex and the
standard library; Dask only inside the dask engine).
"""

from __future__ import annotations

import multiprocessing
import os
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import ProcessPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass
from functools import lru_cache, partial
from itertools import count
from typing import Any, Literal, TypeVar, get_args

import numpy as np

from app.ingest.profiles import TokenizationProfile, Tokenizer

EngineName = Literal["serial", "local", "dask"]
ENGINES: tuple[str, ...] = get_args(EngineName)

LOCAL_MIN_BYTES = 8 * 2**20
"""Inputs larger than this many bytes are counted by the local engine when no engine is named (and more
than one core is available); below it, starting the worker processes costs more than it saves."""

IN_FLIGHT_PER_WORKER = 2
"""Pieces per worker submitted ahead of the merge: one being counted, one waiting in line."""

PIECE_ID_DTYPE = np.dtype(np.int32)

Tag = TypeVar("Tag")
Submit = Callable[..., Any]


class EngineUnavailableError(ValueError):
    """The chosen engine cannot run here: its package is not installed or its cluster cannot be reached."""


@dataclass(frozen=True, eq=False)
class PieceCounts:
    """The tokens of one piece of text, as local type ids.

    ``words`` holds the distinct tokens in order of first occurrence (a word's index is its local id),
    ``first`` the 0-based position of each word's first occurrence in the piece (ascending), and ``ids``
    the local id of every token in text order. Frequencies are not sent: they follow from ``ids``.
    """

    words: list[str]
    first: np.ndarray
    ids: np.ndarray


@lru_cache(maxsize=8)
def _tokenizer(profile: TokenizationProfile) -> Tokenizer:
    """One compiled tokenizer per profile and process (workers count many pieces)."""
    return profile.tokenizer()


def count_piece(text: str, profile: TokenizationProfile) -> PieceCounts:
    """Tokenize ``text`` under ``profile`` and number its types in order of first occurrence."""
    tokens = _tokenizer(profile).tokens(text)
    first_of: dict[str, int] = {}
    # One C-level pass: setdefault keeps the position where each word was first seen, so every token
    # gets the first position of its word.
    token_first = np.fromiter(
        map(first_of.setdefault, tokens, count()), dtype=PIECE_ID_DTYPE, count=len(tokens)
    )
    first = np.fromiter(first_of.values(), dtype=PIECE_ID_DTYPE, count=len(first_of))
    local_id = np.empty(len(tokens), dtype=PIECE_ID_DTYPE)
    local_id[first] = np.arange(first.size, dtype=PIECE_ID_DTYPE)
    return PieceCounts(words=list(first_of), first=first, ids=local_id[token_first])


def available_cpus() -> int:
    """The number of cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1


def choose_engine(engine: str | None, total_bytes: int, scheduler: str | None = None) -> str:
    """The engine to count ``total_bytes`` of input with: the one named, else "dask" when a scheduler is
    given, else "local" above ``LOCAL_MIN_BYTES`` on a machine with several cores, else "serial".

    Raises ValueError for an unknown engine, or a scheduler given to another engine than "dask".
    """
    if engine is None:
        if scheduler is not None:
            return "dask"
        return "local" if total_bytes > LOCAL_MIN_BYTES and available_cpus() > 1 else "serial"
    if engine not in ENGINES:
        raise ValueError(f"unknown engine {engine!r} (available: {', '.join(ENGINES)})")
    if scheduler is not None and engine != "dask":
        raise ValueError(f"a scheduler address is only used by the dask engine, not by {engine!r}")
    return engine


def count_pieces(
    pieces: Iterable[tuple[str, Tag]],
    profile: TokenizationProfile,
    engine: str = "serial",
    scheduler: str | None = None,
) -> Iterator[tuple[PieceCounts | None, Tag]]:
    """``count_piece`` of every (text, tag) pair on ``engine``, yielded in input order with its tag (None
    for an empty text, which is not sent anywhere). Close the iterator to stop the workers early."""
    if engine == "serial":
        for text, tag in pieces:
            yield (count_piece(text, profile) if text else None), tag
        return
    workers = _local_pool() if engine == "local" else _dask_workers(scheduler)
    with workers as (submit, slots):
        pending: deque[tuple[Any, Tag]] = deque()
        for text, tag in pieces:
            pending.append((submit(count_piece, text, profile) if text else None, tag))
            if len(pending) >= IN_FLIGHT_PER_WORKER * slots:
                yield _result(*pending.popleft())
        while pending:
            yield _result(*pending.popleft())


def _result(future: Any, tag: Tag) -> tuple[PieceCounts | None, Tag]:
    return (future.result() if future is not None else None), tag


@contextmanager
def _local_pool() -> Iterator[tuple[Submit, int]]:
    workers = available_cpus()
    pool = ProcessPoolExecutor(workers, mp_context=multiprocessing.get_context("spawn"))
    try:
        yield pool.submit, workers
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


@contextmanager
def _dask_workers(scheduler: str | None) -> Iterator[tuple[Submit, int]]:
    """A Dask client on the cluster at ``scheduler``, or on a new local cluster of worker processes."""
    try:
        from dask.distributed import Client, LocalCluster
    except ImportError as exc:
        raise EngineUnavailableError(
            "the dask engine needs dask[distributed] (install lexigrowth with the 'cluster' extra)"
        ) from exc
    if scheduler is None:
        cluster = LocalCluster(
            n_workers=available_cpus(), threads_per_worker=1, processes=True, dashboard_address=None
        )
    else:
        cluster = None
    try:
        try:
            client = Client(cluster if cluster is not None else scheduler)
        except OSError as exc:
            raise EngineUnavailableError(f"cannot reach the Dask scheduler at {scheduler}: {exc}") from exc
        with client:
            slots = sum(client.nthreads().values())
            if not slots:
                raise EngineUnavailableError(f"the Dask cluster at {scheduler} has no workers")
            # pure=False: every piece is a new task, and its text is not hashed to name it.
            yield partial(client.submit, pure=False), slots
    finally:
        if cluster is not None:
            cluster.close()
