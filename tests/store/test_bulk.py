"""Bulk storage: 200,000 types, in the random order a text yields them, come back unchanged."""

from __future__ import annotations

import random

from app.store import corpora as store
from tests.store.test_corpora import record

TYPES = 200_000
# Words that need escaping in PostgreSQL's COPY text format or in SQL: tab, newline, carriage return,
# backslash, COPY's null marker \N, quotes; and non-ASCII, combining and astral characters.
AWKWARD = [
    "tab\there",
    "new\nline",
    "carriage\rreturn",
    "back\\slash",
    "\\N",
    "it's",
    'say "hi"',
    "naïve",
    "e\u0301",
    "𝔘",
]


def test_200k_types_round_trip(engine):
    rng = random.Random(20240601)
    words = [f"w{i:06d}{rng.choice('abcdé')}" for i in range(TYPES - len(AWKWARD))] + AWKWARD
    rng.shuffle(words)
    counts = {w: rng.randint(1, 50) for w in words}
    cid = store.save_corpus(engine, record(tokens=sum(counts.values()), types=len(counts), counts=counts))

    assert store.frequencies(engine, cid) == counts
    # Reference page: Python's sort by descending count, then word (code-point order).
    expected = sorted(counts.items(), key=lambda wc: (-wc[1], wc[0]))
    total, rows = store.word_counts(engine, cid, limit=50, offset=1000)
    assert total == TYPES and rows == expected[1000:1050]
    assert store.word_counts(engine, cid, search="\\")[1] == sorted(
        ((w, c) for w, c in counts.items() if "\\" in w), key=lambda wc: (-wc[1], wc[0])
    )
