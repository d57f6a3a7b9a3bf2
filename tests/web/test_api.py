"""JSON API round trips through the real app (FastAPI's TestClient, i.e. httpx)."""

from __future__ import annotations

import re
from collections import Counter

# A short public-domain passage (Lincoln, Gettysburg Address, 1863), used as plain input text.
GETTYSBURG = (
    "Four score and seven years ago our fathers brought forth on this continent, a new nation, conceived in "
    "Liberty, and dedicated to the proposition that all men are created equal. Now we are engaged in a great "
    "civil war, testing whether that nation, or any nation so conceived and so dedicated, can long endure."
)


def expected_counts(text: str) -> Counter:
    # Reference tokenization for this ASCII passage: runs of letters, lower-cased (common practice).
    return Counter(re.findall(r"[a-z]+", text.lower()))


def upload(client, name: str, content: bytes, filename: str = "speech.txt", **form):
    return client.post(
        "/api/corpora?wait=1", data={"name": name, **form}, files={"files": (filename, content, "text/plain")}
    )


def test_health(client):
    health = client.get("/api/health").json()
    # tasks run in the requesting thread here (no worker process): nothing queued, nothing waiting
    assert health["status"] == "ok" and health["problems"] == [] and health["worker"] is None
    assert health["queue"] == {"running": 0, "queued": 0, "oldest_queued_seconds": None}


def test_upload_summary_spectrum_growth_round_trip(client):
    response = upload(client, "Gettysburg", GETTYSBURG.encode(), labels="author=Lincoln\nregister=speech")
    assert response.status_code == 201, response.text
    summary = response.json()
    counts = expected_counts(GETTYSBURG)
    assert summary["tokens"] == sum(counts.values())
    assert summary["types"] == len(counts)
    assert summary["hapaxes"] == sum(1 for c in counts.values() if c == 1)
    assert summary["labels"] == {"author": "Lincoln", "register": "speech"}
    assert summary["profile"]["name"] == "default"

    cid = summary["id"]
    assert client.get(f"/api/corpora/{cid}").json()["name"] == "Gettysburg"
    assert [c["id"] for c in client.get("/api/corpora").json()] == [cid]

    spectrum = client.get(f"/api/corpora/{cid}/spectrum").json()
    assert spectrum["tokens"] == summary["tokens"] and spectrum["types"] == summary["types"]
    assert spectrum["spectrum"] == sorted([m, v] for m, v in Counter(counts.values()).items())

    growth = client.get(f"/api/corpora/{cid}/growth").json()
    tokens = re.findall(r"[a-z]+", GETTYSBURG.lower())
    for point in growth["text_order"]:
        assert point["types"] == len(set(tokens[: point["tokens"]]))
    last = growth["random_order"]["points"][-1]
    assert last["tokens"] == len(tokens) and abs(last["types"] - len(counts)) < 1e-9

    lines = client.get(f"/api/corpora/{cid}/spectrum.tsv").text.splitlines()
    comments = [line for line in lines if line.startswith("#")]
    assert f"# tokens: {spectrum['tokens']}" in comments and f"# types: {spectrum['types']}" in comments
    tsv = [line for line in lines if not line.startswith("#")]
    assert tsv[0] == "occurrences\ttypes" and len(tsv) == len(spectrum["spectrum"]) + 1
    assert [list(map(int, row.split("\t"))) for row in tsv[1:]] == spectrum["spectrum"]
    words = client.get(f"/api/corpora/{cid}/words.csv").text.splitlines()
    assert words[0] == "word,count" and len(words) == len(counts) + 1
    assert client.get(f"/api/corpora/{cid}/words", params={"search": "nation"}).json()["words"] == [
        {"word": "nation", "count": 3}
    ]


def test_upload_without_wait_gives_a_job_that_finishes(client):
    response = client.post("/api/corpora", data={"name": "async", "text": GETTYSBURG})
    assert response.status_code == 202
    job_url = response.json()["url"]
    for _ in range(200):
        job = client.get(job_url).json()
        if job["status"] in ("done", "failed"):
            break
        import time

        time.sleep(0.05)
    assert job["status"] == "done", job
    assert client.get(f"/api/corpora/{job['corpus_id']}").json()["tokens"] == sum(
        expected_counts(GETTYSBURG).values()
    )


def test_unreadable_file_is_refused_and_store_unchanged(client):
    before = client.get("/api/corpora").json()
    response = upload(client, "broken", b"PK\x03\x04 this is not a real archive", filename="draft.docx")
    assert 400 <= response.status_code < 500
    assert "draft.docx" in response.json()["detail"]
    response = upload(client, "binary", bytes(range(256)) * 20, filename="photo.txt")
    assert 400 <= response.status_code < 500 and "photo.txt" in response.json()["detail"]
    response = upload(client, "no words", b"12 34 56 -- !!", filename="numbers.txt")
    assert 400 <= response.status_code < 500 and "no word tokens" in response.json()["detail"]
    assert client.get("/api/corpora").json() == before


def test_upload_limit_and_bad_labels(client):
    too_big = b"word " * (6 * 1024 * 1024 // 5)
    response = upload(client, "big", too_big)
    assert response.status_code == 413 and "limit" in response.json()["detail"]
    response = upload(client, "labels", b"some words here", labels="=no key")
    assert response.status_code == 422 and "non-empty key" in response.json()["detail"]
    assert client.get("/api/corpora").json() == []


def test_missing_corpus_is_404(client):
    assert client.get("/api/corpora/999").status_code == 404
    assert client.get("/corpora/999").status_code == 404


def test_invalid_page_parameters_get_the_error_page_and_the_api_keeps_json(client):
    page = client.get("/corpora/not-a-number")
    assert page.status_code == 422 and page.headers["content-type"].startswith("text/html")
    assert "Cannot use this input" in page.text and "corpus_id" in page.text and "integer" in page.text
    api = client.get("/api/corpora/not-a-number")
    assert api.status_code == 422 and api.json()["detail"][0]["loc"] == ["path", "corpus_id"]


def test_openapi_document_is_served(client):
    doc = client.get("/openapi.json").json()
    assert "/api/corpora/{corpus_id}/spectrum" in doc["paths"]
