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
