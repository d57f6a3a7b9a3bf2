"""Corpora as the pages, the API and the command line ask for them: one corpus or all, their summaries,
spectrum, text-order growth, word list, what each was made from; opening a store; deleting a corpus.

The front door to ``app.store.corpora`` for the web and the command line (they import no store module).
A corpus is handed out as the stored row (``StoredCorpus``): read its fields; change it only through the
services (``delete``, ``app.services.library.rename_and_relabel``)."""

from __future__ import annotations

from typing import Any

from sqlalchemy.engine import Engine

from app.store import corpora as store
from app.store.db import make_engine
from app.store.tables import Corpus

StoredCorpus = Corpus
"""A corpus as the store keeps it: id, name, totals, owner, when it was counted, its stored fields."""


CorpusNotFoundError = store.CorpusNotFoundError
"""Raised by every lookup of a corpus id that does not exist (the message names it)."""


def open_store(database_url: str) -> Engine:
    """The store at a SQLAlchemy URL (SQLite file or a database server), its tables made or upgraded."""
    return make_engine(database_url)


def lookup(engine: Engine, corpus_id: int) -> StoredCorpus:
    """The corpus with this id; ``CorpusNotFoundError`` when there is none."""
    return store.get_corpus(engine, corpus_id)


def summary(corpus: StoredCorpus) -> dict[str, Any]:
    """The corpus summary of the JSON API: totals, labels, profile, sources, what it was made from and the
    stored fields that could not be read (``damaged``)."""
    return store.summary(corpus)


def summaries(engine: Engine) -> list[dict[str, Any]]:
    """The summary of every stored corpus, in the Library's order."""
    return [store.summary(corpus) for corpus in store.list_corpora(engine)]


def library_version(engine: Engine) -> tuple:
    """A value that changes whenever a corpus is added, deleted, renamed or relabelled (the Library page is
    kept rendered until it does)."""
    return store.library_version(engine)


def made_from(corpus: StoredCorpus) -> dict[str, Any]:
    """What a corpus was made from (text, word counts, spectrum, bundle) and the statistics that leaves out
    (``unavailable``), with ``word_list`` and ``text_order`` saying whether it has them."""
    return store.source(corpus)


def spectrum(engine: Engine, corpus_id: int) -> list[tuple[int, int]]:
    """The frequency spectrum as (m, V_m) pairs in increasing m."""
    return store.spectrum_pairs(engine, corpus_id)


def text_order_growth(engine: Engine, corpus_id: int) -> list[tuple[int, int]]:
    """The exact type growth in text order as (tokens, types) points (empty without text order)."""
    return store.growth_points(engine, corpus_id)


def word_counts(
    engine: Engine, corpus_id: int, search: str | None = None, limit: int | None = 100, offset: int = 0
) -> tuple[int, list[tuple[str, int]]]:
    """(number of words matching ``search``, a page of (word, count) by descending count, then word);
    ``limit=None`` gives every word."""
    return store.word_counts(engine, corpus_id, search, limit, offset)


def delete(engine: Engine, corpus_id: int) -> None:
    """Delete a corpus with everything computed from it (the caller checks who may)."""
    store.delete_corpus(engine, corpus_id)
