"""Limits on what a word-count list, a spectrum or a bundle may claim, checked before anything is computed or
stored: the exact statistics convolve the spectrum up to twice its largest frequency, so an invented file of
24 bytes could otherwise ask for terabytes (README, "Corpora from counts", limits)."""

from __future__ import annotations

import time

import pytest
from sqlalchemy import func, select
from sqlmodel import Session

from app.ingest import counts
from app.store.tables import CachedResult, Corpus, GrowthPoint, PrefixSpectrumRow, SpectrumRow, WordCount


def _rows(client) -> dict[str, int]:
    with Session(client.app.state.engine) as session:
        return {
            table.__name__: session.execute(select(func.count()).select_from(table)).scalar_one()
            for table in (Corpus, WordCount, SpectrumRow, GrowthPoint, PrefixSpectrumRow, CachedResult)
        }


def _upload(client, kind: str, content: bytes, name: str = "limits"):
    return client.post(
        "/api/corpora?wait=1", data={"kind": kind, "name": name}, files={"files": ("t.tsv", content)}
    )


def test_a_24_byte_spectrum_claiming_ten_trillion_tokens_is_refused_and_stores_nothing(client):
    content = b"1\t1\n9900000000000\t1\n"  # the review's file: 24 characters as written, 20 bytes
    before = _rows(client)
    response = _upload(client, "spectrum", content)
    assert response.status_code == 422
    assert "line 2: the frequency 9,900,000,000,000 is outside 1 .. 10,000,000" in response.json()["detail"]
    assert _rows(client) == before and client.get("/api/corpora").json() == []


def test_the_largest_frequency_limit_is_exact(client, monkeypatch):
    # The limit itself costs 3 s of exact statistics (README); the boundary is checked at a smaller one.
    monkeypatch.setattr(counts, "MAX_FREQUENCY", 100_000)
    above = _upload(client, "spectrum", b"1\t5\n100001\t1\n")
    assert above.status_code == 422 and "100,001 is outside 1 .. 100,000" in above.json()["detail"]
    below = _upload(client, "spectrum", b"1\t5\n100000\t1\n")
    assert below.status_code == 201, below.text
    assert below.json()["tokens"] == 100_005
    too_many = _upload(client, "word-counts", b"the,60000\nthe,40001\n")
    assert too_many.status_code == 422 and "add up to 100,001" in too_many.json()["detail"]


def test_a_spectrum_with_too_many_rows_is_refused_while_it_is_read(tmp_path):
    """A million rows (7 MB): refused at the first row past the limit, before any statistic is computed."""
    path = tmp_path / "rows.tsv"
    path.write_text("".join(f"{m}\t1\n" for m in range(1, 1_000_001)))
    started = time.process_time()
    with pytest.raises(counts.CountsInputError, match=r"line 100001: more than 100,000 spectrum rows"):
        counts.read_spectrum([(path, "rows.tsv")])
    assert time.process_time() - started < 10  # reading 100,001 rows, nothing more


def test_word_count_lists_follow_the_word_rules_and_limits(client, monkeypatch):
    refused = [
        (b"the,3\n,2\n", "line 2: '' is not a word"),
        (b"the,3\nesc\x1bape,2\n", "line 2: 'esc\\x1bape' is not a word"),
        (b"the,3\n" + b"w" * 101 + b",2\n", "longer than 100 characters"),
        (b"the,20000000\n", "the count 20,000,000 is outside 1 .. 10,000,000"),
    ]
    for content, message in refused:
        response = _upload(client, "word-counts", content)
        assert response.status_code == 422 and message in response.json()["detail"], response.text
    monkeypatch.setattr(counts, "MAX_TYPES", 100)
    table = "".join(f"w{chr(ord('a') + i // 26)}{chr(ord('a') + i % 26)},1\n" for i in range(101))
    response = _upload(client, "word-counts", table.encode())
    assert response.status_code == 422 and "more than 100 different words" in response.json()["detail"]
    assert client.get("/api/corpora").json() == []


def test_a_large_spectrums_page_and_json_stay_bounded_and_the_download_has_every_row(client):
    rows = 20_000  # far more distinct frequencies than a text has (a few thousand at 10^8 tokens)
    table = "".join(f"{m}\t1\n" for m in range(1, rows + 1)).encode()
    response = _upload(client, "spectrum", table, "many rows")
    assert response.status_code == 201, response.text
    corpus_id = response.json()["id"]
    page = client.get(f"/corpora/{corpus_id}")
    assert page.status_code == 200 and len(page.content) < 400_000
    body = client.get(f"/api/corpora/{corpus_id}/spectrum").json()
    assert body["rows"] == rows and len(body["spectrum"]) == 10_000 and "spectrum.tsv" in body["note"]
    rest = client.get(f"/api/corpora/{corpus_id}/spectrum", params={"offset": 10_000}).json()
    assert rest["spectrum"][0] == [10_001, 1] and rest["spectrum"][-1] == [rows, 1]
    download = client.get(body["download"])
    lines = [line for line in download.text.splitlines() if line and not line.startswith("#")]
    assert len(lines) == rows + 1 and lines[-1] == f"{rows}\t1"


def test_a_failure_of_the_exact_statistics_stores_nothing(client, monkeypatch):
    """They are computed before the corpus is stored (once, the corpus was stored and they failed after)."""
    from app.services import modelling

    def exhausted(_spectrum):
        raise MemoryError("Unable to allocate 72.0 TiB")

    monkeypatch.setattr(modelling, "random_order_growth_of", exhausted)
    before = _rows(client)
    for kind, content in (("spectrum", b"1\t5\n7\t2\n"), ("word-counts", b"the,7\ncat,1\n"), ("text", None)):
        if content is None:
            response = client.post("/api/corpora?wait=1", data={"name": "t", "text": "the cat and the dog"})
        else:
            response = _upload(client, kind, content)
        assert response.status_code == 422 and "MemoryError" in response.json()["detail"], kind
    assert _rows(client) == before
