"""Downloadable tables as HTTP attachments."""

from __future__ import annotations

import re
from collections.abc import Iterable, Iterator

from fastapi import Response
from fastapi.responses import StreamingResponse

from app.services.corpora import StoredCorpus
from app.services.export import spectrum_tsv_pieces, table_pieces


def file_stem(corpus: StoredCorpus) -> str:
    return re.sub(r"[^A-Za-z0-9._-]+", "-", corpus.name).strip("-")[:60] or f"corpus-{corpus.id}"


def attachment(text: str | bytes, filename: str, media_type: str) -> Response:
    return Response(
        text, media_type=media_type, headers={"Content-Disposition": f'attachment; filename="{filename}"'}
    )


def streamed_attachment(pieces: Iterator[str], filename: str, media_type: str) -> StreamingResponse:
    """A table sent as it is written (``app.services.export``), however many rows it has."""
    return StreamingResponse(
        (piece.encode("utf-8") for piece in pieces),
        media_type=media_type,
        headers={"Content-Disposition": f'attachment; filename="{filename}"'},
    )


def spectrum_tsv_response(corpus: StoredCorpus, pairs: Iterable[tuple[int, int]]) -> StreamingResponse:
    return streamed_attachment(
        spectrum_tsv_pieces(pairs, corpus), f"{file_stem(corpus)}-spectrum.tsv", "text/tab-separated-values"
    )


def word_counts_csv_response(corpus: StoredCorpus, rows: Iterable[tuple[str, int]]) -> StreamingResponse:
    return streamed_attachment(
        table_pieces(["word", "count"], rows),
        f"{file_stem(corpus)}-word-counts.csv",
        "text/csv; charset=utf-8",
    )


def bundle_response(corpus: StoredCorpus, data: bytes, compressed: bool) -> Response:
    suffix, media_type = (".json.gz", "application/gzip") if compressed else (".json", "application/json")
    return attachment(data, f"{file_stem(corpus)}-bundle{suffix}", media_type)
