"""Consistency checks of a store, through the JSON API and through SQLite itself."""

from __future__ import annotations

import csv
import io
import sqlite3
from pathlib import Path

import httpx

from tests.safety.generated import GeneratedText


def sqlite_health(store: Path) -> dict[str, object]:
    """journal_mode, integrity_check and foreign_key_check of the SQLite file, read with the standard
    library's sqlite3 (a second reader beside the running server, which WAL mode allows).

    ``PRAGMA integrity_check`` answers the single row "ok" for a sound database and ``PRAGMA
    foreign_key_check`` lists every row whose parent row is missing (SQLite documentation, "Pragma
    statements"): rows of a corpus whose corpus row is absent are exactly a half-stored corpus."""
    connection = sqlite3.connect(f"file:{store}?mode=ro", uri=True, timeout=30)
    try:
        return {
            "journal_mode": connection.execute("PRAGMA journal_mode").fetchone()[0],
            "integrity_check": [row[0] for row in connection.execute("PRAGMA integrity_check")],
            "foreign_key_check": connection.execute("PRAGMA foreign_key_check").fetchall(),
        }
    finally:
        connection.close()


def assert_sound_store(store: Path) -> None:
    health = sqlite_health(store)
    assert health["journal_mode"] == "wal", health
    assert health["integrity_check"] == ["ok"], health
    assert health["foreign_key_check"] == [], health


def assert_complete_corpus(http: httpx.Client, corpus: dict) -> None:
    """A stored corpus agrees with itself: the spectrum identities sum_m V_m = V and sum_m m V_m = N
    (they hold by definition of the frequency spectrum: every type has exactly one frequency m, and the m
    tokens of each type add up to N), V_1 = hapaxes, and its word counts (the CSV download) sum to N over
    V distinct words."""
    cid = corpus["id"]
    spectrum = http.get(f"/api/corpora/{cid}/spectrum")
    assert spectrum.status_code == 200, spectrum.text
    body = spectrum.json()
    pairs = body["spectrum"]
    assert (body["tokens"], body["types"]) == (corpus["tokens"], corpus["types"])
    assert sum(v for _, v in pairs) == corpus["types"]
    assert sum(m * v for m, v in pairs) == corpus["tokens"]
    assert dict(map(tuple, pairs)).get(1, 0) == corpus["hapaxes"]
    download = http.get(f"/api/corpora/{cid}/words.csv")
    assert download.status_code == 200
    rows = list(csv.reader(io.StringIO(download.text)))
    assert rows[0] == ["word", "count"]
    assert len(rows) - 1 == corpus["types"]
    assert len({word for word, _ in rows[1:]}) == corpus["types"]
    assert sum(int(count) for _, count in rows[1:]) == corpus["tokens"]


def assert_matches(http: httpx.Client, corpus: dict, text: GeneratedText) -> None:
    """The corpus holds exactly the counts computed beside the generated text (numpy.bincount)."""
    assert (corpus["tokens"], corpus["types"]) == (text.tokens, text.types)
    pairs = http.get(f"/api/corpora/{corpus['id']}/spectrum").json()["spectrum"]
    assert {m: v for m, v in pairs} == text.spectrum
