"""Engines that tokenize and count the pieces of a corpus: in this process, in local worker processes, or on
a Dask cluster.

``app.ingest.counting`` cuts the corpus into pieces at safe boundaries, groups consecutive pieces into
batches, and merges the batch results in text order; an engine only decides where ``count_batch`` runs.
Every engine runs the same function on the same batches with the same tokenizer
(``TokenizationProfile.tokenizer()``), so all engines give identical results, down to the type-id
sequence.

- ``serial``: in this process, one piece after the other.
- ``local``: a pool of worker processes (``concurrent.futures.ProcessPoolExecutor``, one per available
  core, started with "spawn" so it is safe from a threaded web server).
- ``dask``: the workers of a Dask cluster (``dask.distributed``, the optional "cluster" extra): an existing
  one given by its scheduler address, or a ``LocalCluster`` of worker processes started for the call. The
  pieces are read here and sent to the workers; only the per-piece results come back.

In both parallel engines at most ``IN_FLIGHT_PER_WORKER`` batches per worker are submitted and not yet
merged, so memory stays bounded whatever the size of the corpus, and results are merged in submission
order.

Worker processes import this module to run ``count_batch``: keep its imports light (numpy and the
standard library; polars only where a batch is counted, Dask only inside the dask engine).
"""

from __future__ import annotations

import multiprocessing
import os
from collections import deque
from collections.abc import Callable, Iterable, Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass
from functools import lru_cache, partial
from typing import Any, Literal, TypeVar, get_args

import numpy as np

from app.ingest.profiles import TokenizationProfile, Tokenizer
from app.processes import die_with_parent

EngineName = Literal["serial", "local", "dask"]
ENGINES: tuple[str, ...] = get_args(EngineName)

LOCAL_MIN_BYTES = 16 * 2**20
"""Inputs larger than this many bytes are counted by the local engine when no engine is named (and more
than one core is available); below it, starting the worker processes costs more than it saves."""

IN_FLIGHT_PER_WORKER = 2
"""Batches per worker submitted ahead of the merge: one being counted, one waiting in line."""

LOCAL_DTYPE = np.dtype(np.int32)
WORD_SEPARATOR = "\n"

Tag = TypeVar("Tag")
Submit = Callable[..., Any]


class EngineUnavailableError(ValueError):
    """The chosen engine cannot run here: its package is not installed or its cluster cannot be reached."""


@dataclass(frozen=True, eq=False)
class BatchCounts:
    """The tokens of a batch of consecutive pieces of text, as local type ids.

    ``joined_words`` holds the distinct tokens in order of first occurrence, joined by line breaks (one
    string pickles far faster than a list of them; tokens are never empty and never hold whitespace),
    ``first`` the 0-based position of each word's first occurrence in the batch (ascending, int32), and
    ``ids`` the local id (the index in ``words()``) of every token in text order, in the smallest unsigned
    integer type that holds them, and ``piece_tokens`` the number of tokens of each piece (where the texts
    of a corpus begin and end). Frequencies are not sent: they follow from ``ids``.
    """

    joined_words: str
    first: np.ndarray
    ids: np.ndarray
    piece_tokens: np.ndarray

    def words(self) -> list[str]:
        """The distinct tokens in order of first occurrence."""
        return self.joined_words.split(WORD_SEPARATOR) if self.joined_words else []


@lru_cache(maxsize=8)
def _tokenizer(profile: TokenizationProfile) -> Tokenizer:
    """One compiled tokenizer per profile and process (workers count many batches)."""
    return profile.tokenizer()


def count_batch(pieces: Sequence[str], profile: TokenizationProfile) -> BatchCounts:
    """Tokenize each piece under ``profile`` and number the types of the batch in order of first
    occurrence (the pieces are consecutive parts of one text, each cut at a safe boundary).

    Tokens never become Python objects: polars gives every token the position of its word's first
    occurrence (a window minimum over equal words, hashed in native code); the positions where a token is
    its word's first occurrence are the types in order, and numbering them gives every token its local id.
    """
    import polars as pl  # here: the process that merges batches counted elsewhere never loads it

    tokenizer = _tokenizer(profile)
    tokens, piece_tokens = tokenizer.token_series_of(pieces)
    frame = pl.DataFrame({"word": tokens}).with_row_index("position")
    token_first = frame.select(pl.col("position").min().over("word"))["position"].to_numpy()
    first = np.flatnonzero(token_first == np.arange(token_first.size, dtype=token_first.dtype))
    # Local ids in the smallest unsigned type that holds them (often 2 bytes a token): less to send.
    local_id = np.empty(token_first.size, dtype=np.min_scalar_type(max(first.size - 1, 0)))
    local_id[first] = np.arange(first.size)
    return BatchCounts(
        joined_words=WORD_SEPARATOR.join(tokens.gather(first).to_list()),
        first=first.astype(LOCAL_DTYPE),
        ids=local_id[token_first],
        piece_tokens=piece_tokens,
    )


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


def count_batches(
    batches: Iterable[tuple[Sequence[str], Tag]],
    profile: TokenizationProfile,
    engine: str = "serial",
    scheduler: str | None = None,
) -> Iterator[tuple[BatchCounts | None, Tag]]:
    """``count_batch`` of every (pieces, tag) pair on ``engine``, yielded in input order with its tag (None
    for a batch without text, which is not sent anywhere). Close the iterator to stop the workers early."""
    if engine == "serial":
        for pieces, tag in batches:
            yield (count_batch(pieces, profile) if any(pieces) else None), tag
        return
    workers = _local_pool() if engine == "local" else _dask_workers(scheduler)
    with workers as (submit, slots):
        pending: deque[tuple[Any, Tag]] = deque()
        for pieces, tag in batches:
            pending.append((submit(count_batch, pieces, profile) if any(pieces) else None, tag))
            if len(pending) >= IN_FLIGHT_PER_WORKER * slots:
                yield _result(*pending.popleft())
        while pending:
            yield _result(*pending.popleft())


def _result(future: Any, tag: Tag) -> tuple[BatchCounts | None, Tag]:
    return (future.result() if future is not None else None), tag


@contextmanager
def _local_pool() -> Iterator[tuple[Submit, int]]:
    workers = available_cpus()
    pool = ProcessPoolExecutor(
        workers, mp_context=multiprocessing.get_context("spawn"), initializer=die_with_parent
    )
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
    with ExitStack() as stack:
        if scheduler is None:
            cluster = LocalCluster(
                n_workers=available_cpus(), threads_per_worker=1, processes=True, dashboard_address=":0"
            )
            address = stack.enter_context(cluster)
        else:
            address = scheduler
        try:
            client = stack.enter_context(Client(address))
        except OSError as exc:
            raise EngineUnavailableError(f"cannot reach the Dask scheduler at {scheduler}: {exc}") from exc
        slots = sum(client.nthreads().values())
        if not slots:
            raise EngineUnavailableError(f"the Dask cluster at {scheduler} has no workers")
        # pure=False: every batch is a new task, and its text is not hashed to name it.
        yield partial(client.submit, pure=False), slots
