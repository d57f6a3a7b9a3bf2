"""The texts of a corpus: where one text ends and the next begins, and each text's word counts.

Each uploaded file is one text, unless a text separator says how a file holds several:

- ``file`` (the default): the whole file is one text;
- ``paragraph``: texts are separated by one or more blank lines;
- ``line``: every non-blank line is a text;
- any other value: a line that holds only that marker (blanks around it ignored), e.g. ``###``, separates
  two texts; the marker line itself belongs to no text.

Blank lines never make texts in the ``paragraph`` and ``line`` modes. A text without any word token
(two markers in a row, a part of only punctuation) is skipped and counted (``empty_skipped``).

Splitting streams over the chunks a reader gives: only the part of a line not yet ended is carried, so a
file of any size is split in bounded memory. The per-text counts come afterwards from the corpus's type-id
file (one type id per token in text order, ``app.ingest.counting``): a text is a slice of it.
"""

from __future__ import annotations

import unicodedata
import zlib
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

FILE, PARAGRAPH, LINE = "file", "paragraph", "line"
MODES = (FILE, PARAGRAPH, LINE)
MAX_MARKER_CHARS = 100
BLOCK_TOKENS = 1 << 22
"""Short texts are counted together, in blocks of about this many tokens (np.unique of (text, type) keys);
a longer text is counted alone, by slices."""


def check_separator(value: str | None) -> str:
    """The separator as given, checked: one of ``MODES`` or a marker of at most ``MAX_MARKER_CHARS``
    characters without line breaks or control characters. Empty means ``file``. Raises ValueError."""
    value = (value or "").strip()
    if not value:
        return FILE
    if value.lower() in MODES:
        return value.lower()
    if len(value) > MAX_MARKER_CHARS:
        raise ValueError(f"text_separator: a marker line has at most {MAX_MARKER_CHARS} characters")
    if any(unicodedata.category(c) in ("Cc", "Cf", "Zl", "Zp") for c in value):
        raise ValueError("text_separator: a marker cannot hold line breaks or control characters")
    return value


def split(chunks: Iterable[tuple[str, int]], separator: str) -> Iterator[tuple[str, int, bool]]:
    """The text of one file as (fragment, bytes consumed so far, whether a text ends after the fragment).
    The file's end always ends its last text; the caller adds that."""
    if separator == FILE:
        for chunk, consumed in chunks:
            yield chunk, consumed, False
        return
    partial = ""
    consumed = 0
    open_paragraph = False
    for chunk, consumed in chunks:
        lines = (partial + chunk).split("\n")
        partial = lines.pop()
        for line in lines:
            fragment, ends_text = _line(line, separator, open_paragraph)
            open_paragraph = separator == PARAGRAPH and not ends_text and (open_paragraph or bool(fragment))
            yield fragment, consumed, ends_text
    if partial:
        fragment, ends_text = _line(partial, separator, open_paragraph)
        yield fragment, consumed, ends_text


def _line(line: str, separator: str, open_paragraph: bool) -> tuple[str, bool]:
    """(what of the line belongs to a text, whether a text ends after it)."""
    blank = not line.strip()
    if separator == LINE:
        return ("", False) if blank else (line, True)
    if separator == PARAGRAPH:
        return ("", open_paragraph) if blank else (line + "\n", False)
    return ("", True) if line.strip() == separator else (line + "\n", False)


@dataclass(frozen=True)
class TextCounts:
    """One text of a corpus: its name, tokens, types and word counts, the words given by their ranks in
    the corpus's word list in code-point order (ascending), with their counts."""

    name: str
    tokens: int
    ranks: np.ndarray
    counts: np.ndarray

    @property
    def types(self) -> int:
        return int(self.ranks.size)

    def packed(self) -> tuple[bytes, bytes]:
        """The ranks (as gaps, uint32) and the counts (int64), each little-endian and zlib-compressed."""
        gaps = np.diff(self.ranks, prepend=0).astype("<u4")
        return zlib.compress(gaps.tobytes()), zlib.compress(self.counts.astype("<i8").tobytes())

    @staticmethod
    def unpack(ranks: bytes, counts: bytes) -> tuple[np.ndarray, np.ndarray]:
        """(ranks, counts) from ``packed``."""
        gaps = np.frombuffer(zlib.decompress(ranks), dtype="<u4").astype(np.int64)
        return np.cumsum(gaps), np.frombuffer(zlib.decompress(counts), dtype="<i8").astype(np.int64)


def text_names(source_names: Sequence[str], text_sources: Sequence[int]) -> list[str]:
    """A name per text: its file's name, numbered ("letters.txt #2") when the file holds several."""
    per_source = np.bincount(np.asarray(text_sources, dtype=np.int64), minlength=len(source_names))
    seen = np.zeros(len(source_names), dtype=np.int64)
    names = []
    for source in text_sources:
        seen[source] += 1
        name = source_names[source]
        names.append(name if per_source[source] == 1 else f"{name} #{seen[source]}")
    return names


def word_ranks(words: Iterable[str]) -> np.ndarray:
    """For each type id (order of first appearance), its rank among the words in code-point order: the
    order in which the store keeps and reads a corpus's word list."""
    words = list(words)
    order = sorted(range(len(words)), key=words.__getitem__)
    rank = np.empty(len(words), dtype=np.int64)
    rank[order] = np.arange(len(words), dtype=np.int64)
    return rank


def per_text_counts(
    type_ids_path: Path, ends: np.ndarray, rank: np.ndarray, names: Sequence[str]
) -> Iterator[TextCounts]:
    """The word counts of each text, the texts being the token ranges between ``ends`` (ascending
    cumulative token counts, every text non-empty), read from the type-id file (int32 per token)."""
    types = rank.size
    ids = np.memmap(type_ids_path, dtype="<i4", mode="r") if int(ends[-1]) else np.zeros(0, "<i4")
    starts = np.concatenate([[0], ends[:-1]])
    index = 0
    while index < len(ends):
        start = int(starts[index])
        if int(ends[index]) - start > BLOCK_TOKENS:  # a long text alone, by slices
            frequency = np.zeros(types, dtype=np.int64)
            for at in range(start, int(ends[index]), BLOCK_TOKENS):
                block = rank[ids[at : min(at + BLOCK_TOKENS, int(ends[index]))]]
                frequency += np.bincount(block, minlength=types)
            found = np.flatnonzero(frequency)
            yield TextCounts(names[index], int(ends[index]) - start, found, frequency[found])
            index += 1
            continue
        last = int(np.searchsorted(ends, start + BLOCK_TOKENS, side="right"))  # texts ending in this block
        lengths = np.diff(np.concatenate([[start], ends[index:last]]))
        local_text = np.repeat(np.arange(last - index, dtype=np.int64), lengths)
        keys, counts = np.unique(
            local_text * types + rank[ids[start : int(ends[last - 1])]], return_counts=True
        )
        text_of_key = keys // types
        bounds = np.searchsorted(text_of_key, np.arange(last - index + 1))
        for offset in range(last - index):
            a, b = bounds[offset], bounds[offset + 1]
            yield TextCounts(
                names[index + offset], int(lengths[offset]), keys[a:b] % types, counts[a:b].astype(np.int64)
            )
        index = last
