"""Reading and writing corpora. One ingestion is one transaction: all of it lands, or nothing."""

from __future__ import annotations

import json
import unicodedata
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from datetime import datetime
from itertools import islice
from typing import Any

from sqlalchemy import delete, func, insert, select
from sqlalchemy.engine import Engine
from sqlalchemy.exc import DBAPIError
from sqlmodel import Session, SQLModel

from app.store import tasks
from app.store.db import transaction
from app.store.tables import (
    BackgroundTask,
    CachedResult,
    Corpus,
    CorpusText,
    GrowthPoint,
    IssuedCorpusId,
    PrefixSpectrumRow,
    SpectrumRow,
    WordCount,
)

BULK_ROWS = 20_000


class CorpusNotFoundError(LookupError):
    def __init__(self, corpus_id: int) -> None:
        super().__init__(f"no corpus with id {corpus_id}")
        self.corpus_id = corpus_id


@dataclass
class CorpusRecord:
    """Everything the store keeps of one ingested corpus (plain values, no text)."""

    name: str
    labels: dict[str, str]
    profile: dict[str, Any]
    sources: list[str]
    tokens: int
    types: int
    hapaxes: int
    content_hash: str
    program_version: str
    counts: dict[str, int]
    spectrum: list[tuple[int, int]]
    growth: list[tuple[int, int]]
    prefix_spectra: dict[str, tuple[int, list[tuple[int, int]]]] = field(default_factory=dict)
    text_order: dict[str, Any] = field(default_factory=dict)
    source_kind: str = "text"
    origin: dict[str, Any] | None = None
    # The texts, in order: (name, tokens, types, packed word ranks, packed counts), see ``CorpusText``;
    # ``texts_info`` says how they were found (None: a corpus without texts).
    texts: list[tuple[str, int, int, bytes, bytes]] = field(default_factory=list)
    texts_info: dict[str, Any] | None = None


SOURCE_TITLES = {
    "text": "text",
    "word-counts": "a word-count list",
    "spectrum": "a frequency spectrum",
    "bundle": "a corpus bundle",
}
"""What each source kind of a corpus is called on pages."""


def _stored_json(text: str | None, kind: type, valid: Callable[[Any], bool] = lambda _value: True) -> Any:
    """A JSON column's value, or None when it does not parse to ``kind`` (and ``valid``): a row edited by
    hand or written by another program."""
    try:
        value = json.loads(text or "")
    except (TypeError, ValueError):
        return None
    return value if isinstance(value, kind) and valid(value) else None


def _text_map(value: dict) -> bool:
    return all(isinstance(k, str) and isinstance(v, str) for k, v in value.items())


def _text_list(value: list) -> bool:
    return all(isinstance(v, str) for v in value)


def stored_fields(corpus: Corpus) -> tuple[dict[str, Any], list[str]]:
    """The labels, profile, file names and origin (None: none) of a stored corpus, each left empty when it
    cannot be read, and the names of those that could not (``damaged``): pages show what is readable
    instead of failing."""
    fields = {
        "labels": _stored_json(corpus.labels_json, dict, _text_map),
        "profile": _stored_json(corpus.profile_json, dict),
        "sources": _stored_json(corpus.sources_json, list, _text_list),
        "origin": _stored_json(corpus.origin_json, dict) if corpus.origin_json else {},
    }
    damaged = [key for key, value in fields.items() if value is None]
    empty = {"labels": {}, "profile": {}, "sources": [], "origin": {}}
    read = {key: empty[key] if value is None else value for key, value in fields.items()}
    return read | {"origin": read["origin"] or None}, damaged


def source(corpus: Corpus) -> dict[str, Any]:
    """What a corpus was made from, and what that leaves out: ``kind`` (text, word-counts, spectrum or
    bundle), ``data`` (the kind of data it holds: a bundle holds that of the corpus it was exported from),
    ``word_list`` and ``text_order`` (whether it has them) and ``unavailable`` (statistics it cannot give)."""
    kind = corpus.source_kind or "text"
    origin = _stored_json(corpus.origin_json, dict) if corpus.origin_json else None
    data = (origin or {}).get("source_kind", "text") if kind == "bundle" else kind
    word_list = data != "spectrum"
    text_order = data == "text"
    unavailable = []
    if not word_list:
        unavailable += ["word list and word search", "word counts download", "distinctive words"]
    if not text_order:
        unavailable += [
            "text-order growth curve",
            "MATTR and MTLD",
            "text-order spread of segments",
            "text-order backtests",
        ]
    return {
        "kind": kind,
        "title": SOURCE_TITLES.get(kind, kind),
        "data": data,
        "origin": origin,
        "word_list": word_list,
        "text_order": text_order,
        "unavailable": unavailable,
    }


def summary(corpus: Corpus) -> dict[str, Any]:
    """The corpus summary of the JSON API. ``damaged`` names the stored fields that could not be read (left
    empty here): a row edited by hand or written by another program."""
    fields, damaged = stored_fields(corpus)
    return {
        "id": corpus.id,
        "name": corpus.name,
        "tokens": corpus.tokens,
        "types": corpus.types,
        "hapaxes": corpus.hapaxes,
        "hapax_share": corpus.hapaxes / corpus.types if corpus.types else 0.0,
        "ttr": corpus.types / corpus.tokens if corpus.tokens else 0.0,
        "labels": fields["labels"],
        "profile": fields["profile"],
        "sources": fields["sources"],
        "content_hash": corpus.content_hash,
        "program_version": corpus.program_version,
        "created_at": corpus.created_at.isoformat(),
        "source": source(corpus),
        "damaged": damaged,
    }


def _batches(rows: Iterable[tuple], size: int) -> Iterator[list[tuple]]:
    iterator = iter(rows)
    while batch := list(islice(iterator, size)):
        yield batch


def _bulk(session: Session, table: type[SQLModel], columns: tuple[str, ...], rows: Iterable[tuple]) -> None:
    """Insert ``rows`` (values in the order of ``columns``) within the session's transaction.

    With psycopg (PostgreSQL) the rows stream through one COPY, several times faster than INSERTs;
    other drivers get executemany INSERTs of ``BULK_ROWS`` rows at a time, on the session's connection
    itself (``Session.execute`` would add the ORM's bookkeeping, about half again the time on SQLite).
    """
    connection = session.connection()
    if connection.dialect.driver == "psycopg":
        import psycopg  # here: a server on SQLite starts without it (0.16 s of its start)
        from psycopg import sql

        copy_sql = sql.SQL("COPY {} ({}) FROM STDIN").format(
            sql.Identifier(table.__tablename__), sql.SQL(", ").join(map(sql.Identifier, columns))
        )
        try:
            with connection.connection.driver_connection.cursor() as cursor, cursor.copy(copy_sql) as copy:
                for row in rows:
                    copy.write_row(row)
        except psycopg.Error as exc:  # raised as SQLAlchemy raises driver errors (IntegrityError...)
            raise DBAPIError.instance(copy_sql.as_string(), None, exc, psycopg.Error) from exc
        return
    statement = insert(table.__table__)
    for batch in _batches(rows, BULK_ROWS):
        connection.execute(statement, [dict(zip(columns, row, strict=True)) for row in batch])


def _issue_corpus_id(session: Session) -> int:
    """A corpus id never issued before (``IssuedCorpusId``); the older issued rows are dropped."""
    issued = IssuedCorpusId()
    session.add(issued)
    session.flush()
    session.execute(delete(IssuedCorpusId).where(IssuedCorpusId.id < issued.id))
    return int(issued.id)


def save_corpus(
    engine: Engine,
    record: CorpusRecord,
    results: dict[str, dict] | None = None,
    results_version: str = "",
    versioned_results: dict[str, tuple[str, dict]] | None = None,
) -> int:
    """Store a corpus with its counts, spectrum, growth and prefix spectra, and the ``results`` already
    computed from them (kind -> payload, cached under ``results_version``; ``versioned_results``: kind ->
    (version, payload), each under its own), in one transaction; run by a task, only while the task is still
    this process's (``app.store.tasks.confirm_in``)."""
    with transaction(engine) as session:
        corpus = Corpus(
            id=_issue_corpus_id(session),
            name=record.name,
            labels_json=json.dumps(record.labels, ensure_ascii=False),
            profile_json=json.dumps(record.profile, ensure_ascii=False),
            profile_name=str(record.profile.get("name", "custom")),
            sources_json=json.dumps(record.sources, ensure_ascii=False),
            tokens=record.tokens,
            types=record.types,
            hapaxes=record.hapaxes,
            content_hash=record.content_hash,
            program_version=record.program_version,
            text_order_json=json.dumps(record.text_order),
            source_kind=record.source_kind,
            origin_json=json.dumps(record.origin, ensure_ascii=False) if record.origin else None,
            texts_json=json.dumps(record.texts_info, ensure_ascii=False) if record.texts_info else None,
        )
        session.add(corpus)
        session.flush()
        cid = corpus.id
        # In key order: appending to the primary-key B-tree is much faster than inserting at random places.
        counts = record.counts
        _bulk(
            session, WordCount, ("corpus_id", "word", "count"), ((cid, w, counts[w]) for w in sorted(counts))
        )
        _bulk(session, SpectrumRow, ("corpus_id", "m", "vm"), ((cid, m, v) for m, v in record.spectrum))
        _bulk(session, GrowthPoint, ("corpus_id", "tokens", "types"), ((cid, n, v) for n, v in record.growth))
        _bulk(
            session,
            PrefixSpectrumRow,
            ("corpus_id", "share", "m", "vm", "prefix_tokens"),
            ((cid, share, m, v, n) for share, (n, pairs) in record.prefix_spectra.items() for m, v in pairs),
        )
        _bulk(
            session,
            CorpusText,
            ("corpus_id", "position", "name", "tokens", "types", "word_ranks", "word_counts"),
            ((cid, position, *text) for position, text in enumerate(record.texts, start=1)),
        )
        for kind, payload in (results or {}).items():
            session.add(_cached_result(cid, kind, results_version, payload))
        for kind, (version, payload) in (versioned_results or {}).items():
            session.add(_cached_result(cid, kind, version, payload))
        tasks.confirm_in(session)  # a task that lost its lease meanwhile stores nothing (rolled back)
        return int(cid)


def list_corpora(engine: Engine) -> list[Corpus]:
    with Session(engine) as session:
        return list(session.exec(select(Corpus).order_by(Corpus.id)).scalars())


def library_version(engine: Engine) -> tuple:
    """What the Library shows of each corpus that can change, or tells one stored corpus from another: id,
    name, labels, owner, content hash and time of counting; read without the corpora's larger columns."""
    with Session(engine) as session:
        rows = session.execute(
            select(
                Corpus.id,
                Corpus.name,
                Corpus.labels_json,
                Corpus.owner_id,
                Corpus.content_hash,
                Corpus.created_at,
            ).order_by(Corpus.id)
        )
        return tuple(tuple(row) for row in rows)


def same_content(engine: Engine, corpus: Corpus) -> list[tuple[int, str, datetime]]:
    """(id, name, time of counting) of every other corpus with this corpus's content hash, oldest first."""
    with Session(engine) as session:
        rows = session.execute(
            select(Corpus.id, Corpus.name, Corpus.created_at)
            .where(Corpus.content_hash == corpus.content_hash, Corpus.id != corpus.id)
            .order_by(Corpus.id)
        )
        return [tuple(row) for row in rows]


def count_corpora(engine: Engine) -> int:
    with Session(engine) as session:
        return int(session.execute(select(func.count()).select_from(Corpus)).scalar_one())


def get_corpus(engine: Engine, corpus_id: int) -> Corpus:
    with Session(engine) as session:
        corpus = session.get(Corpus, corpus_id)
        if corpus is None:
            raise CorpusNotFoundError(corpus_id)
        return corpus


def get_corpora(engine: Engine, corpus_ids: list[int]) -> dict[int, Corpus]:
    """The corpora that still exist among ``corpus_ids``."""
    with Session(engine) as session:
        rows = session.execute(select(Corpus).where(Corpus.id.in_(corpus_ids))).scalars()
        return {c.id: c for c in rows}


def delete_corpus(engine: Engine, corpus_id: int) -> None:
    with transaction(engine) as session:
        get_corpus(engine, corpus_id)
        for table in (WordCount, SpectrumRow, GrowthPoint, PrefixSpectrumRow, CachedResult, CorpusText):
            session.execute(delete(table).where(table.corpus_id == corpus_id))
        session.execute(delete(Corpus).where(Corpus.id == corpus_id))
        # Its model tasks go too: a later corpus that gets the same id must not inherit their state.
        session.execute(
            delete(BackgroundTask).where(
                BackgroundTask.corpus_id == corpus_id, BackgroundTask.kind != "ingest"
            )
        )


def spectrum_pairs(engine: Engine, corpus_id: int) -> list[tuple[int, int]]:
    with Session(engine) as session:
        rows = session.execute(
            select(SpectrumRow.m, SpectrumRow.vm)
            .where(SpectrumRow.corpus_id == corpus_id)
            .order_by(SpectrumRow.m)
        )
        return [(int(m), int(v)) for m, v in rows]


def growth_points(engine: Engine, corpus_id: int) -> list[tuple[int, int]]:
    with Session(engine) as session:
        rows = session.execute(
            select(GrowthPoint.tokens, GrowthPoint.types)
            .where(GrowthPoint.corpus_id == corpus_id)
            .order_by(GrowthPoint.tokens)
        )
        return [(int(n), int(v)) for n, v in rows]


def prefix_spectra(engine: Engine, corpus_id: int) -> dict[str, tuple[int, list[tuple[int, int]]]]:
    """share -> (prefix tokens, spectrum pairs) of the first 10%, 25%, 50% of the text."""
    out: dict[str, tuple[int, list[tuple[int, int]]]] = {}
    with Session(engine) as session:
        rows = session.execute(
            select(
                PrefixSpectrumRow.share,
                PrefixSpectrumRow.prefix_tokens,
                PrefixSpectrumRow.m,
                PrefixSpectrumRow.vm,
            )
            .where(PrefixSpectrumRow.corpus_id == corpus_id)
            .order_by(PrefixSpectrumRow.share, PrefixSpectrumRow.m)
        )
        for share, n, m, v in rows:
            out.setdefault(share, (int(n), []))[1].append((int(m), int(v)))
    return out


def texts_info(corpus: Corpus) -> dict[str, Any] | None:
    """How a corpus's texts were found (``separator``, ``texts``, ``empty_skipped``), or None for a corpus
    without texts."""
    return _stored_json(corpus.texts_json, dict) if corpus.texts_json else None


def corpus_texts(
    engine: Engine, corpus_id: int, limit: int | None = None, offset: int = 0
) -> list[tuple[int, str, int, int]]:
    """(position, name, tokens, types) of the corpus's texts in order (a page of them), without counts."""
    with Session(engine) as session:
        query = (
            select(CorpusText.position, CorpusText.name, CorpusText.tokens, CorpusText.types)
            .where(CorpusText.corpus_id == corpus_id)
            .order_by(CorpusText.position)
            .offset(offset)
        )
        if limit is not None:
            query = query.limit(limit)
        return [(int(p), n, int(t), int(v)) for p, n, t, v in session.execute(query)]


def packed_text_counts(engine: Engine, corpus_id: int) -> list[tuple[int, bytes, bytes]]:
    """(position, packed word ranks, packed counts) of every text of the corpus, in order."""
    with Session(engine) as session:
        rows = session.execute(
            select(CorpusText.position, CorpusText.word_ranks, CorpusText.word_counts)
            .where(CorpusText.corpus_id == corpus_id)
            .order_by(CorpusText.position)
        )
        return [(int(p), bytes(r), bytes(c)) for p, r, c in rows]


def word_counts(
    engine: Engine, corpus_id: int, search: str | None = None, limit: int | None = 100, offset: int = 0
) -> tuple[int, list[tuple[str, int]]]:
    """(number of matching types, page of (word, count) by descending count then word)."""
    if search and any(unicodedata.category(c) == "Cc" for c in search):
        # No word holds a control character (tokens are letters, marks, digits and joiners), and SQLite
        # would read a NUL as the end of the pattern and match every word.
        return 0, []
    with Session(engine) as session:
        where = [WordCount.corpus_id == corpus_id]
        if search:
            # Case-insensitive for A-Z only, on every backend: SQLite's LIKE and ILIKE under the "C"
            # collation of the word column on PostgreSQL. Wildcards typed by the user match literally.
            escaped = search.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")
            where.append(WordCount.word.ilike(f"%{escaped}%", escape="\\"))
        total = session.execute(select(func.count()).select_from(WordCount).where(*where)).scalar_one()
        query = select(WordCount.word, WordCount.count).where(*where)
        query = query.order_by(WordCount.count.desc(), WordCount.word).offset(offset)
        if limit is not None:
            query = query.limit(limit)
        return int(total), [(w, int(c)) for w, c in session.execute(query)]


def frequencies(engine: Engine, corpus_id: int) -> dict[str, int]:
    """Every word with its count (for distinctive words and random samples)."""
    with Session(engine) as session:
        rows = session.execute(
            select(WordCount.word, WordCount.count).where(WordCount.corpus_id == corpus_id)
        )
        return {w: int(c) for w, c in rows}


def cached_result(engine: Engine, corpus_id: int, kind: str, program_version: str) -> dict | None:
    with Session(engine) as session:
        row = session.get(CachedResult, (corpus_id, kind))
        if row is None or row.program_version != program_version:
            return None
        return json.loads(row.payload_json)


FAILURE_PREFIX = '{"error"'
"""How a cached payload that records a failure begins (``json.dumps({"error": ...})``)."""


def cached_result_stamps(
    engine: Engine, corpus_ids: Iterable[int], kind: str, program_version: str
) -> dict[int, tuple[str, bool]]:
    """For each corpus whose result of ``kind`` is cached for this version: when it was stored and whether
    it records a failure, read without the payload itself (a page's cache key, a task's state)."""
    ids = list(corpus_ids)
    if not ids:
        return {}
    with Session(engine) as session:
        rows = session.execute(
            select(
                CachedResult.corpus_id,
                CachedResult.created_at,
                func.substr(CachedResult.payload_json, 1, len(FAILURE_PREFIX)) == FAILURE_PREFIX,
            ).where(
                CachedResult.corpus_id.in_(ids),
                CachedResult.kind == kind,
                CachedResult.program_version == program_version,
            )
        )
        return {int(cid): (created.isoformat(), bool(failed)) for cid, created, failed in rows}


def store_cached_result(
    engine: Engine, corpus_id: int, kind: str, program_version: str, payload: dict
) -> None:
    with transaction(engine) as session:
        session.execute(
            delete(CachedResult).where(CachedResult.corpus_id == corpus_id, CachedResult.kind == kind)
        )
        session.add(_cached_result(corpus_id, kind, program_version, payload))


def _cached_result(corpus_id: int, kind: str, program_version: str, payload: dict) -> CachedResult:
    """The row keeping one computed result of a corpus (``payload`` as JSON) under the code that made it."""
    return CachedResult(
        corpus_id=corpus_id, kind=kind, program_version=program_version, payload_json=json.dumps(payload)
    )


def update_corpus(
    engine: Engine, corpus_id: int, name: str | None = None, labels: dict[str, str] | None = None
) -> None:
    """Set a corpus's name and/or labels (None leaves a field as it is)."""
    with transaction(engine) as session:
        corpus = session.get(Corpus, corpus_id)
        if corpus is None:
            raise CorpusNotFoundError(corpus_id)
        if name is not None:
            corpus.name = name
        if labels is not None:
            corpus.labels_json = json.dumps(labels, ensure_ascii=False)
        session.add(corpus)
