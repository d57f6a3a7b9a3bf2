"""Texts of a corpus: separators, and each text's word counts against a direct count."""

from __future__ import annotations

from collections import Counter

import numpy as np
import pytest

from app.ingest import texts
from app.ingest.counting import count_sources
from app.ingest.profiles import TokenizationProfile
from app.ingest.readers import TextSource

PROFILE = TokenizationProfile()
LETTERS = "The cat sat.\n###\nThe dog ran far, far away\n  ###  \n###\n...\n###\nA cat and a dog\n\n\nlast para here\n"


def counted(sources, separator, chunk_chars=7):
    with count_sources(sources, PROFILE, separator=separator, chunk_chars=chunk_chars) as result:
        found, skipped = result.text_counts()
        words = sorted(result.counts)
        return [
            (t.name, t.tokens, dict(zip([words[r] for r in t.ranks], t.counts.tolist(), strict=True)))
            for t in found
        ], skipped


def reference(parts: list[str]) -> list[tuple[int, dict[str, int]]]:
    # Outside reference: the parts cut by Python's str.split and counted with collections.Counter.
    out = []
    for part in parts:
        tokens = PROFILE.tokenizer().tokens(part)
        if tokens:
            out.append((len(tokens), dict(Counter(tokens))))
    return out


@pytest.mark.parametrize("chunk_chars", [3, 7, 1000])
def test_marker_lines_split_a_file_and_empty_texts_are_skipped(chunk_chars):
    found, skipped = counted([TextSource.from_text("a.txt", LETTERS)], "###", chunk_chars)
    parts = LETTERS.split("\n")
    expected_parts, current = [], []
    for line in parts:
        if line.strip() == "###":
            expected_parts.append("\n".join(current))
            current = []
        else:
            current.append(line)
    expected_parts.append("\n".join(current))
    assert [(n, c) for _, n, c in found] == reference(expected_parts)
    assert [name for name, _, _ in found] == ["a.txt #1", "a.txt #2", "a.txt #3"]
    assert skipped == 2  # between two markers, and the part of only "..."


def test_lines_and_paragraphs():
    by_line, skipped = counted([TextSource.from_text("a.txt", LETTERS)], "line")
    assert [(n, c) for _, n, c in by_line] == reference(LETTERS.split("\n"))
    assert skipped == 5  # four marker lines and "...": lines without a word; blank lines are no texts
    by_paragraph, skipped = counted([TextSource.from_text("a.txt", LETTERS)], "paragraph")
    assert [(n, c) for _, n, c in by_paragraph] == reference(LETTERS.split("\n\n\n"))
    assert skipped == 0


def test_each_file_is_a_text_by_default():
    found, skipped = counted(
        [TextSource.from_text("a.txt", LETTERS), TextSource.from_text("b.txt", "one two two")], "file"
    )
    assert [name for name, _, _ in found] == ["a.txt", "b.txt"]
    assert [(n, c) for _, n, c in found] == reference([LETTERS, "one two two"])
    assert skipped == 0


def test_long_texts_are_counted_by_slices_and_short_ones_in_blocks(monkeypatch):
    monkeypatch.setattr(texts, "BLOCK_TOKENS", 5)
    body = "\n###\n".join(["a b c d e f g h a a", "b c", "c", "d d d d d d d d d d d d e"])
    found, _ = counted([TextSource.from_text("x", body)], "###")
    assert [(n, c) for _, n, c in found] == reference(body.split("\n###\n"))


def test_packed_counts_round_trip():
    text = texts.TextCounts("t", 10, np.array([0, 3, 70000, 70001]), np.array([1, 2, 3, 2**40]))
    ranks, counts = texts.TextCounts.unpack(*text.packed())
    assert ranks.tolist() == [0, 3, 70000, 70001]
    assert counts.tolist() == [1, 2, 3, 2**40]


def test_separator_is_checked():
    assert texts.check_separator("") == "file"
    assert texts.check_separator(" Line ") == "line"
    assert texts.check_separator("###") == "###"
    with pytest.raises(ValueError, match="at most 100"):
        texts.check_separator("#" * 101)
    with pytest.raises(ValueError, match="control"):
        texts.check_separator("a\x1bb")


def test_every_engine_finds_the_same_texts():
    # Reference: the serial engine, one piece after the other in this process.
    body = "\n".join(f"line {'ab' * (i % 7)} word{'x' * (i % 5)} and more" for i in range(3000))
    source = TextSource.from_text("lines.txt", body)
    found = {}
    for engine in ("serial", "local"):
        with count_sources([source], PROFILE, separator="line", engine=engine, chunk_chars=4096) as result:
            texts_found, _ = result.text_counts()
            found[engine] = [(t.tokens, t.ranks.tolist(), t.counts.tolist()) for t in texts_found]
    assert len(found["serial"]) == 3000
    assert found["local"] == found["serial"]
