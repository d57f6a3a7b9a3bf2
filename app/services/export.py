"""Table exports shared by the web downloads and the command line (CSV/TSV with the API's column names)."""

from __future__ import annotations

import csv
import io
from collections.abc import Iterable, Iterator, Sequence
from itertools import islice

from app.config import PROGRAM_VERSION
from app.store.tables import Corpus

FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def neutralise(cell: object) -> object:
    """Prefix text cells that a spreadsheet would run as a formula with an apostrophe (OWASP CSV injection)."""
    if isinstance(cell, str) and cell.startswith(FORMULA_START):
        return "'" + cell
    return cell


STREAM_ROWS = 10_000
"""Rows written per piece of a streamed table."""


def table_pieces(
    header: Sequence[str], rows: Iterable[Sequence[object]], delimiter: str = ","
) -> Iterator[str]:
    """The CSV/TSV text of a table in pieces of ``STREAM_ROWS`` rows (a download is sent as it is written)."""
    out = io.StringIO()
    writer = csv.writer(out, delimiter=delimiter, lineterminator="\n")
    writer.writerow(header)
    iterator = iter(rows)
    while batch := list(islice(iterator, STREAM_ROWS)):
        writer.writerows([neutralise(c) for c in row] for row in batch)
        yield out.getvalue()
        out.seek(0)
        out.truncate()
    yield out.getvalue()


def table_text(header: Sequence[str], rows: Iterable[Sequence[object]], delimiter: str = ",") -> str:
    return "".join(table_pieces(header, rows, delimiter))


SPECTRUM_COLUMNS = ("occurrences", "types")


def _one_line(text: object) -> str:
    return " ".join(str(text).split())


def spectrum_tsv(pairs: Iterable[tuple[int, int]], corpus: Corpus) -> str:
    return "".join(spectrum_tsv_pieces(pairs, corpus))


def spectrum_tsv_pieces(pairs: Iterable[tuple[int, int]], corpus: Corpus) -> Iterator[str]:
    """The frequency spectrum in our own layout: a header of '#' comment lines naming the corpus, its
    tokenization profile, tokens, types and the program version, then two named columns: ``occurrences``
    (how often a type occurs, m) and ``types`` (how many types occur exactly that often, V_m), m ascending."""
    header = [
        "# Lexigrowth frequency spectrum",
        f"# corpus: {_one_line(corpus.name)} (id {corpus.id})",
        f"# tokenization profile: {_one_line(corpus.profile_name)}",
        f"# tokens: {corpus.tokens}",
        f"# types: {corpus.types}",
        f"# counted by Lexigrowth version: {_one_line(corpus.program_version)}",
        f"# exported by Lexigrowth version: {PROGRAM_VERSION}",
        "# columns: occurrences = times a type occurs; types = number of types that occur exactly that often",
    ]
    yield "\n".join(header) + "\n"
    yield from table_pieces(SPECTRUM_COLUMNS, pairs, delimiter="\t")
