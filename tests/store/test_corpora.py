"""Store: what is saved comes back unchanged, and one ingestion is one transaction."""

from __future__ import annotations

import pytest
from sqlalchemy.exc import IntegrityError

from app.store import corpora as store


def record(name: str = "c", **changes) -> store.CorpusRecord:
    counts = {"the": 3, "cat": 2, "sat": 1, "mat": 1, "=cmd": 1}
    values = dict(
        name=name,
        labels={"author": "A"},
        profile={"name": "default"},
        sources=["a.txt"],
        tokens=8,
        types=5,
        hapaxes=3,
        content_hash="abc",
        program_version="test",
        counts=counts,
        spectrum=[(1, 3), (2, 1), (3, 1)],
        growth=[(1, 1), (4, 3), (8, 5)],
        prefix_spectra={"0.5": (4, [(1, 2), (2, 1)])},
        text_order={"mattr": 0.5},
    )
    return store.CorpusRecord(**(values | changes))


def test_round_trip(engine):
    cid = store.save_corpus(engine, record())
    summary = store.summary(store.get_corpus(engine, cid))
    assert (summary["tokens"], summary["types"], summary["hapaxes"]) == (8, 5, 3)
    assert summary["labels"] == {"author": "A"}
    assert store.spectrum_pairs(engine, cid) == [(1, 3), (2, 1), (3, 1)]
    assert store.growth_points(engine, cid) == [(1, 1), (4, 3), (8, 5)]
    assert store.prefix_spectra(engine, cid) == {"0.5": (4, [(1, 2), (2, 1)])}
    assert store.frequencies(engine, cid) == record().counts
    total, rows = store.word_counts(engine, cid, limit=2)
    assert total == 5 and rows == [("the", 3), ("cat", 2)]
    assert store.word_counts(engine, cid, search="a")[0] == 3
    assert store.word_counts(engine, cid, search="%")[0] == 0  # LIKE wildcards are matched literally


def test_failed_save_leaves_nothing(engine):
    store.save_corpus(engine, record("kept"))
    broken = record(
        "broken", spectrum=[(1, 3), (1, 3)]
    )  # duplicate key: fails after the corpus row is written
    with pytest.raises(IntegrityError):
        store.save_corpus(engine, broken)
    assert [c.name for c in store.list_corpora(engine)] == ["kept"]
    assert store.count_corpora(engine) == 1


def test_delete_removes_every_row(engine):
    cid = store.save_corpus(engine, record())
    store.store_cached_result(engine, cid, "fits", "test", {"x": 1})
    store.delete_corpus(engine, cid)
    with pytest.raises(store.CorpusNotFoundError):
        store.get_corpus(engine, cid)
    assert store.spectrum_pairs(engine, cid) == [] and store.frequencies(engine, cid) == {}
    assert store.cached_result(engine, cid, "fits", "test") is None


def test_cache_is_tied_to_program_version(engine):
    cid = store.save_corpus(engine, record())
    store.store_cached_result(engine, cid, "fits", "1.0", {"x": 1})
    assert store.cached_result(engine, cid, "fits", "1.0") == {"x": 1}
    assert store.cached_result(engine, cid, "fits", "2.0") is None


def test_counts_beyond_32_bits_round_trip(engine):
    # PostgreSQL's integer is 4 bytes, -2147483648 to +2147483647 (PostgreSQL manual, "Numeric Types");
    # token counts of huge corpora go past it, so counts are bigint.
    big = 3 * 2**31
    counts = {"the": big, "cat": 2**40}
    cid = store.save_corpus(
        engine,
        record(
            tokens=big + 2**40,
            types=2,
            hapaxes=0,
            counts=counts,
            spectrum=[(big, 1), (2**40, 1)],
            growth=[(big, 2)],
        ),
    )
    summary = store.summary(store.get_corpus(engine, cid))
    assert (summary["tokens"], summary["types"]) == (big + 2**40, 2)
    assert store.frequencies(engine, cid) == counts
    assert store.spectrum_pairs(engine, cid) == [(big, 1), (2**40, 1)]
    assert store.growth_points(engine, cid) == [(big, 2)]


def test_equal_counts_are_paged_in_code_point_order(engine):
    # Reference: Python's str ordering compares code points, as SQLite's BINARY collation does (memcmp of
    # UTF-8, which keeps code-point order); a PostgreSQL database with a linguistic default collation
    # (en-US: a < B < b < é < z) must give the same pages.
    words = ["b", "B", "a", "é", "z", "Z", "_x", "ab", "a b", "Ä"]
    cid = store.save_corpus(engine, record(counts=dict.fromkeys(words, 1) | {"the": 5}))
    total, rows = store.word_counts(engine, cid, limit=None)
    assert total == len(words) + 1
    assert rows == [("the", 5)] + [(w, 1) for w in sorted(words)]
    assert store.word_counts(engine, cid, limit=3, offset=2)[1] == [(w, 1) for w in sorted(words)[1:4]]


def test_search_ignores_ascii_case_and_matches_wildcards_literally(engine):
    # Reference: SQLite's documentation ("The LIKE, GLOB, REGEXP, MATCH, and extract operators"): LIKE is
    # case-insensitive for the 26 ASCII letters only, and ESCAPE makes % and _ literal. PostgreSQL's
    # plain LIKE is case-sensitive (PostgreSQL manual, "Pattern Matching"), so the store must not use it.
    counts = {"The": 4, "the": 3, "a_b": 2, "axb": 2, "a\\b": 1, "100%": 1, "1000": 1}
    cid = store.save_corpus(engine, record(counts=counts))
    assert store.word_counts(engine, cid, search="THE") == (2, [("The", 4), ("the", 3)])
    assert store.word_counts(engine, cid, search="_")[1] == [("a_b", 2)]
    assert store.word_counts(engine, cid, search="\\")[1] == [("a\\b", 1)]
    assert store.word_counts(engine, cid, search="0%")[1] == [("100%", 1)]


def test_search_with_a_control_character_matches_nothing(engine):
    # SQLite's C interface reads a NUL as the end of a LIKE pattern ("%\0%" would become "%", every word);
    # PostgreSQL refuses NUL in text. No token holds a control character, so nothing matches.
    cid = store.save_corpus(engine, record(counts={"the": 3, "cat": 1}))
    assert store.word_counts(engine, cid, search="\x00") == (0, [])
    assert store.word_counts(engine, cid, search="th\x00e") == (0, [])
    assert store.word_counts(engine, cid, search="t\x1b") == (0, [])
    assert store.word_counts(engine, cid, search="t")[0] == 2
