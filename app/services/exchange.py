"""Corpora from counts: word-count lists, frequency spectra and corpus bundles in, bundles out.

A word-count list or a spectrum has no text order: such a corpus is stored without a text-order growth
curve, prefix spectra or text-order statistics (pages show the random-order expectation only and the
text-order backtests are skipped). A word-count list with a text column (rows ``text, word, count``) has
texts; a bundle does not carry texts. A bundle recreates the corpus it was exported from, whatever that was
made from, and records its origin.
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
from sqlalchemy.engine import Engine

from app.config import PROGRAM_VERSION
from app.ingest import counts as parse
from app.ingest.names import clean_name
from app.ingest.profiles import TokenizationProfile
from app.ingest.texts import TextCounts
from app.services import modelling, texts
from app.services.ingestion import (
    MAX_NAME_LENGTH,
    IngestionInputError,
    check_name,
    parse_labels,
    store_with_exact_statistics,
)
from app.store import corpora as store
from app.store.corpora import CorpusRecord
from app.store.tables import Corpus

COUNT_KINDS = (parse.WORD_COUNTS, parse.SPECTRUM, parse.BUNDLE)
TEXT_COLUMN = "text column"
"""How the texts of a word-count list with a text column were found (``texts_info["separator"]``)."""
ProgressCallback = Callable[[int, int], None]
StageCallback = Callable[[str], None]


def check_kind(kind: str | None) -> str:
    """The source kind of an upload (``text`` when not given); a clear error for anything else."""
    kind = (kind or parse.TEXT).strip()
    if kind not in parse.SOURCE_KINDS:
        raise IngestionInputError(f"kind: {kind!r} is not one of {', '.join(parse.SOURCE_KINDS)}")
    return kind


def _record_from_counts(
    kind: str, files: list[tuple[Path, str]], name: str, labels: dict[str, str], profile: TokenizationProfile
) -> tuple[CorpusRecord, list[TextCounts]]:
    """The corpus of word-count lists or spectrum tables, and its texts (those of a word-count list's text
    column; none otherwise)."""
    counts: dict[str, int] = {}
    by_text: dict[str, dict[str, int]] = {}
    if kind == parse.WORD_COUNTS:
        counts = parse.read_word_counts(files, profile, texts=by_text)
        spectrum = parse.spectrum_of_counts(counts)
        content = parse.data_hash(kind, sorted(counts.items()))
    else:
        spectrum = parse.read_spectrum(files).pairs
        content = parse.data_hash(kind, spectrum)
    tokens, types = parse.check_spectrum(spectrum, None, None, kind)
    return CorpusRecord(
        name=check_name(name),
        labels=labels,
        profile=profile.to_dict(),
        sources=[shown for _, shown in files],
        tokens=tokens,
        types=types,
        hapaxes=dict(spectrum).get(1, 0),
        content_hash=content,
        program_version=PROGRAM_VERSION,
        counts=counts,
        spectrum=spectrum,
        growth=[],
        source_kind=kind,
    ), _texts_of_list(by_text, counts)


def _texts_of_list(by_text: dict[str, dict[str, int]], counts: dict[str, int]) -> list[TextCounts]:
    """The texts of a word-count list with a text column, their words by rank in the code-point order of
    the corpus's word list (as ``app.ingest.texts`` gives those of texts)."""
    rank = {word: index for index, word in enumerate(sorted(counts))}
    texts = []
    for name, words in by_text.items():
        ranks = np.array(sorted(rank[w] for w in words), dtype=np.int64)
        ordered = sorted(words, key=rank.__getitem__)
        values = np.array([words[w] for w in ordered], dtype=np.int64)
        texts.append(TextCounts(name, int(values.sum()), ranks, values))
    return texts


def _bundle_rules(bundle: parse.BundleCorpus, name: str | None, labels: dict[str, str]) -> dict[str, Any]:
    """The bundle's name, labels (with the upload's own), profile and file names under the rules of the
    Upload form (``check_name``, ``parse_labels``, ``TokenizationProfile``), each refusal naming its field."""

    def field(what: str, check: Callable[[], Any]) -> Any:
        try:
            return check()
        except (ValueError, TypeError) as exc:
            raise IngestionInputError(f"bundle: {what}: {exc}") from exc

    field("corpus.name", lambda: check_name(bundle.name))
    return {
        "name": check_name(name or bundle.name),
        "labels": field("corpus.labels", lambda: parse_labels(bundle.labels | labels)),
        "profile": field("corpus.profile", lambda: TokenizationProfile.from_dict(bundle.profile).to_dict()),
        "sources": [
            field(f"corpus.sources[{i}]", lambda s=s: clean_name(s, "a file name", MAX_NAME_LENGTH))
            for i, s in enumerate(bundle.sources)
        ],
    }


def _record_from_bundle(
    files: list[tuple[Path, str]], name: str | None, labels: dict[str, str]
) -> tuple[CorpusRecord, list[TextCounts]]:
    """The corpus of a bundle and its texts (none when the bundle carries none)."""
    if len(files) != 1:
        raise IngestionInputError("files: a bundle is one file; upload bundles one at a time")
    path, shown = files[0]
    bundle = parse.read_bundle(path, shown)
    return CorpusRecord(
        **_bundle_rules(bundle, name, labels),
        tokens=bundle.tokens,
        types=bundle.types,
        hapaxes=bundle.hapaxes,
        content_hash=bundle.content_hash,
        program_version=bundle.program_version,
        counts=bundle.counts,
        spectrum=bundle.spectrum,
        growth=bundle.growth,
        prefix_spectra=bundle.prefix_spectra,
        text_order=bundle.text_order,
        source_kind=parse.BUNDLE,
        origin=bundle.origin | {"file": shown},
        texts=[(t.name, t.tokens, t.types, *t.packed()) for t in bundle.texts],
        texts_info=bundle.texts_info,
    ), bundle.texts


def ingest_counts(
    engine: Engine,
    kind: str,
    files: list[tuple[Path, str]],
    name: str | None,
    labels: dict[str, str] | None = None,
    profile: TokenizationProfile | None = None,
    progress: ProgressCallback | None = None,
    on_stage: StageCallback | None = None,
) -> int:
    """Read word-count lists, spectrum tables or one bundle (``kind``) as one corpus and store it; returns
    its id. Raises ``CountsInputError``/``IngestionInputError`` (nothing stored) for input that does not fit.
    ``name`` may be empty for a bundle (its own name is kept)."""
    stage = on_stage or (lambda _name: None)
    if kind not in COUNT_KINDS:
        raise IngestionInputError(f"kind: {kind!r} is not one of {', '.join(COUNT_KINDS)}")
    if not files:
        raise IngestionInputError("files: give at least one file")
    total = sum(path.stat().st_size for path, _ in files)
    if progress:
        progress(0, total)
    if kind == parse.BUNDLE:
        record, text_list = _record_from_bundle(files, name, labels or {})
    else:
        record, text_list = _record_from_counts(
            kind, files, name or "", labels or {}, profile or TokenizationProfile()
        )
    if text_list and not record.texts:
        record.texts = [(t.name, t.tokens, t.types, *t.packed()) for t in text_list]
        record.texts_info = {"separator": TEXT_COLUMN, "texts": len(text_list), "empty_skipped": 0}
    if progress:
        progress(total, total)
    return store_with_exact_statistics(engine, record, stage, texts.growth_results(text_list, record.types))


def bundle_document(engine: Engine, corpus_id: int) -> dict[str, Any]:
    """Everything of a stored corpus that a bundle carries (see the README for the fields)."""
    corpus = store.get_corpus(engine, corpus_id)
    summary = store.summary(corpus)
    source = summary["source"]
    counts = store.frequencies(engine, corpus_id)
    prefixes = store.prefix_spectra(engine, corpus_id)
    return {
        "program_version": PROGRAM_VERSION,
        "exported_at": datetime.now(UTC).isoformat(timespec="seconds"),
        "corpus": {
            "name": corpus.name,
            "labels": summary["labels"],
            "profile": summary["profile"],
            "source_kind": source["data"],
            "origin": source["origin"],
            "sources": summary["sources"],
            "content_hash": corpus.content_hash,
            "program_version": corpus.program_version,
            "created_at": summary["created_at"],
            "tokens": corpus.tokens,
            "types": corpus.types,
            "hapaxes": corpus.hapaxes,
            "counts": [[w, counts[w]] for w in sorted(counts)] if source["word_list"] else None,
            "spectrum": [list(p) for p in store.spectrum_pairs(engine, corpus_id)],
            "growth": [list(p) for p in store.growth_points(engine, corpus_id)] or None,
            "prefix_spectra": {
                share: {"tokens": n, "spectrum": [list(p) for p in pairs]}
                for share, (n, pairs) in prefixes.items()
            }
            or None,
            "text_order": modelling.stored_text_order(corpus)[0] or None,
            "texts": _bundle_texts(engine, corpus),
        },
    }


def _bundle_texts(engine: Engine, corpus: Corpus) -> dict[str, Any] | None:
    """The texts a bundle carries (README): how they were found and each text's name, tokens and word counts
    by rank in the code-point order of the corpus's word list; None for a corpus without texts."""
    info = store.texts_info(corpus)
    if info is None:
        return None
    listed = []
    shown = store.corpus_texts(engine, corpus.id)
    packed = store.packed_text_counts(engine, corpus.id)
    for (_, name, tokens, _types), (_, packed_ranks, packed_counts) in zip(shown, packed, strict=True):
        ranks, counts = TextCounts.unpack(packed_ranks, packed_counts)
        listed.append({"name": name, "tokens": tokens, "ranks": ranks.tolist(), "counts": counts.tolist()})
    return {"separator": info["separator"], "empty_skipped": info.get("empty_skipped", 0), "list": listed}


def export_bundle(engine: Engine, corpus_id: int, compress: bool = True) -> bytes:
    """The bundle file of a stored corpus (gzip-compressed JSON unless ``compress`` is false)."""
    return parse.encode_bundle(bundle_document(engine, corpus_id), compress)
