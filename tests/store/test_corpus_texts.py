"""The texts of a corpus in the store (SQLite and PostgreSQL): stored with the corpus, read back as a
sparse matrix of word counts, deleted with it."""

from __future__ import annotations

import numpy as np
import pytest

from app.ingest.readers import TextSource
from app.services import ingestion
from app.services import texts as text_service
from app.store import corpora as store

BODY = "\n###\n".join(["the cat sat on the mat", "the dog ran", "###", "a cat and a dog and a bird", "zebra"])


def test_texts_are_stored_and_read_back_as_a_sparse_matrix(engine):
    cid = ingestion.ingest(engine, [TextSource.from_text("pasted", BODY)], "letters", text_separator="###")
    table = text_service.text_table(engine, cid)
    assert (table["separator"], table["total"], table["empty_skipped"]) == (
        "###",
        4,
        2,
    )  # two empty texts between three marker lines
    assert [(t["name"], t["tokens"], t["types"]) for t in table["texts"]] == [
        ("pasted #1", 6, 5),
        ("pasted #2", 3, 3),
        ("pasted #3", 8, 5),
        ("pasted #4", 1, 1),
    ]
    counts = text_service.text_word_counts(engine, cid)
    assert counts.matrix.shape == (4, len(counts.words))
    # Outside reference: the pooled word counts stored for the corpus are the column sums.
    pooled = store.frequencies(engine, cid)
    assert (
        dict(zip(counts.words, np.asarray(counts.matrix.sum(axis=0)).ravel().tolist(), strict=True)) == pooled
    )
    assert counts.matrix[0, counts.words.index("the")] == 2
    assert counts.matrix[2, counts.words.index("a")] == 3
    store.delete_corpus(engine, cid)
    assert store.corpus_texts(engine, cid) == []


def test_a_corpus_without_texts_says_so(engine):
    from tests.store.test_corpora import record

    cid = store.save_corpus(engine, record())
    with pytest.raises(text_service.NoTextsError, match="no texts"):
        text_service.text_table(engine, cid)
    with pytest.raises(text_service.NoTextsError, match="no texts"):
        text_service.text_growth(engine, cid)


def test_growth_by_texts_is_kept_and_recomputed_alike(engine):
    cid = ingestion.ingest(engine, [TextSource.from_text("pasted", BODY)], "letters", text_separator="###")
    kept = text_service.text_growth(engine, cid)
    store.store_cached_result(engine, cid, text_service.TEXT_GROWTH, "other code", {})
    again = text_service.text_growth(engine, cid)  # computed from the stored texts this time
    assert again == kept
    assert kept["interpolation"]["points"][-1]["types"] == pytest.approx(kept["types"])
    assert kept["types"] == len(store.frequencies(engine, cid))
