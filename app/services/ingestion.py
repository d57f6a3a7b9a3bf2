"""Ingestion: texts -> counts, spectrum, growth and text-order statistics -> the store (one transaction)."""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import asdict
from pathlib import Path

from sqlalchemy.engine import Engine

from app.config import PROGRAM_VERSION
from app.core import text_order
from app.ingest.counting import count_sources
from app.ingest.engines import EngineName
from app.ingest.names import clean_name
from app.ingest.profiles import TokenizationProfile
from app.ingest.readers import TextSource
from app.ingest.texts import check_separator as text_separator
from app.services import modelling, texts
from app.store.corpora import CorpusRecord, save_corpus

MAX_NAME_LENGTH = 200
MAX_LABELS = 50
MAX_LABEL_KEY, MAX_LABEL_VALUE = 100, 500
MAX_TEXT_ORDER_TOKENS = 20_000_000  # MATTR/MTLD/segments on at most this many tokens (about 120 MB of text)

ProgressCallback = Callable[[int, int], None]
StageCallback = Callable[[str], None]


class IngestionInputError(ValueError):
    """Input that cannot become a corpus; the message says why and nothing is stored."""


NOTE_KEY = "note"
"""The label that keeps the lines of a label text without "=" (a free-text note)."""


def _label_lines(text: str) -> list[tuple[str, str]]:
    """``key=value`` lines as pairs; the lines without "=" and any ``note=`` lines become one free-text
    ``note`` (joined by "; " in their order), as the forms' help says."""
    pairs: list[tuple[str, str]] = []
    notes: list[str] = []
    for line in text.splitlines():
        if not line.strip():
            continue
        if "=" in line:
            key, value = line.split("=", 1)
            if key.strip() == NOTE_KEY:
                notes.append(value)
            else:
                pairs.append((key, value))
        else:
            notes.append(line)
    if notes:
        pairs.append((NOTE_KEY, "; ".join(n.strip() for n in notes if n.strip())))
    return pairs


def parse_labels(text: str | dict | None) -> dict[str, str]:
    """Labels as a JSON object or as ``key=value`` lines (blank lines ignored; lines without "=" kept as a
    free-text ``note``). The one reading of labels for the Upload form, the corpus page, the API and the
    command line."""
    if text is None or text == "":
        return {}
    if isinstance(text, dict):
        items = text.items()
    else:
        stripped = text.strip()
        if stripped.startswith("{"):
            try:
                parsed = json.loads(stripped)
            except json.JSONDecodeError as exc:
                raise IngestionInputError(f"labels: not valid JSON ({exc.msg})") from exc
            if not isinstance(parsed, dict):
                raise IngestionInputError("labels: expected a JSON object of key/value pairs")
            items = parsed.items()
        else:
            items = _label_lines(stripped)
    items = list(items)
    if len(items) > MAX_LABELS:
        raise IngestionInputError(f"labels: at most {MAX_LABELS} labels")
    try:
        labels = {
            clean_name(str(k), "labels: a key", MAX_LABEL_KEY): clean_name(
                str(v), f"labels: the value of {str(k)[:MAX_LABEL_KEY]!r}", MAX_LABEL_VALUE
            )
            for k, v in items
        }
    except ValueError as exc:
        raise IngestionInputError(str(exc)) from exc
    if any(not k for k in labels):
        raise IngestionInputError("labels: a label needs a non-empty key")
    return labels


def check_name(name: str) -> str:
    try:
        name = clean_name(name or "", "name", MAX_NAME_LENGTH)
    except ValueError as exc:
        raise IngestionInputError(str(exc)) from exc
    if not name:
        raise IngestionInputError("name: a corpus needs a name")
    return name


def text_order_statistics(type_ids) -> dict:
    """MATTR, MTLD and segment spreads on the text-order sequence of type ids (capped for huge corpora)."""
    measured = text_order.text_order_statistics(type_ids[:MAX_TEXT_ORDER_TOKENS])
    return {
        "measured_tokens": measured.measured_tokens,
        "mattr": measured.mattr,
        "mtld": measured.mtld,
        "segments": [asdict(s) for s in measured.segments],
    }


def ingest(
    engine: Engine,
    sources: list[TextSource],
    name: str,
    labels: dict[str, str] | None = None,
    profile: TokenizationProfile | None = None,
    progress: ProgressCallback | None = None,
    work_dir: Path | None = None,
    counting_engine: EngineName | None = None,
    scheduler: str | None = None,
    on_stage: StageCallback | None = None,
    text_separator: str | None = None,
) -> int:
    """Count the sources as one corpus and store it with its exact statistics; returns the new corpus id.

    ``counting_engine`` ("serial", "local" or "dask") and ``scheduler`` (a Dask scheduler address) choose
    where the text is tokenized (``app.ingest.counting.count_sources``; by default by input size).
    ``on_stage`` hears the name of each step after counting. The models are fitted afterwards, as a task
    of their own (``app.services.tasks``). ``text_separator`` says where the texts of a file end
    (``app.ingest.texts``: ``file``, ``paragraph``, ``line`` or a marker line); every text is stored with
    its word counts (``app.services.texts``)."""
    stage = on_stage or (lambda _name: None)
    name = check_name(name)
    separator = check_text_separator(text_separator)
    if not sources:
        raise IngestionInputError("files: give at least one file or some pasted text")
    profile = profile or TokenizationProfile()
    with count_sources(
        sources,
        profile,
        progress=progress,
        workdir=work_dir,
        engine=counting_engine,
        scheduler=scheduler,
        separator=separator,
    ) as result:
        stage("text-order statistics")
        spectrum = result.spectrum()
        text_list, empty_skipped = result.text_counts()
        record = CorpusRecord(
            name=name,
            labels=labels or {},
            profile=profile.to_dict(),
            sources=[s.name for s in sources],
            tokens=result.tokens,
            types=result.types,
            hapaxes=spectrum.hapaxes,
            content_hash=result.content_hash,
            program_version=PROGRAM_VERSION,
            counts=result.counts,
            spectrum=[tuple(p) for p in spectrum.pairs()],
            growth=list(result.growth),
            prefix_spectra={
                share: (n, [tuple(p) for p in sp.pairs()]) for share, (n, sp) in result.prefix_spectra.items()
            },
            text_order=text_order_statistics(result.type_ids()),
            texts=[(t.name, t.tokens, t.types, *t.packed()) for t in text_list],
            texts_info={"separator": separator, "texts": len(text_list), "empty_skipped": empty_skipped},
        )
    stage("growth by texts")
    return store_with_exact_statistics(engine, record, stage, texts.growth_results(text_list, result.types))


def check_text_separator(value: str | None) -> str:
    try:
        return text_separator(value)
    except ValueError as exc:
        raise IngestionInputError(str(exc)) from exc


def store_with_exact_statistics(
    engine: Engine,
    record: CorpusRecord,
    stage: StageCallback,
    more_results: dict[str, tuple[str, dict]] | None = None,
) -> int:
    """Compute a new corpus's exact statistics, then store it with them (and ``more_results``, kind ->
    (version, payload)) in one transaction: a failure of either stores nothing. Returns the new corpus id."""
    stage("exact statistics")
    results = modelling.exact_statistics(record.spectrum)
    stage("storing")
    return save_corpus(engine, record, results, modelling.CACHE_KEY, more_results)
