"""Downloadable tables as HTTP attachments."""

from __future__ import annotations

import re
from collections.abc import Iterable

from fastapi import Response

from app.services.export import spectrum_tsv, table_text
from app.store.tables import Corpus


def file_stem(corpus: Corpus) -> str:
    return re.sub(r"[^A-Za-z0-9._-]+", "-", corpus.name).strip("-")[:60] or f"corpus-{corpus.id}"


def attachment(text: str | bytes, filename: str, media_type: str) -> Response:
    return Response(
        text, media_type=media_type, headers={"Content-Disposition": f'attachment; filename="{filename}"'}
    )


def spectrum_tsv_response(corpus: Corpus, pairs: Iterable[tuple[int, int]]) -> Response:
    return attachment(
        spectrum_tsv(pairs, corpus), f"{file_stem(corpus)}-spectrum.tsv", "text/tab-separated-values"
    )


def word_counts_csv_response(corpus: Corpus, rows: Iterable[tuple[str, int]]) -> Response:
    return attachment(
        table_text(["word", "count"], rows), f"{file_stem(corpus)}-word-counts.csv", "text/csv; charset=utf-8"
    )


def bundle_response(corpus: Corpus, data: bytes, compressed: bool) -> Response:
    suffix, media_type = (".json.gz", "application/gzip") if compressed else (".json", "application/json")
    return attachment(data, f"{file_stem(corpus)}-bundle{suffix}", media_type)
