"""Entity tags: a page or JSON answer asked again with If-None-Match is 304 without a body while it is
unchanged (RFC 9110, sections 8.8.3 and 13.1.2), and 200 with a new tag once it changed."""

from __future__ import annotations

from app.web.caching import matches


def upload(client, name: str, text: str) -> int:
    answer = client.post("/api/corpora?wait=1", data={"name": name, "text": text})
    assert answer.status_code == 201, answer.text
    return answer.json()["id"]


def test_unchanged_answers_are_not_sent_again_and_changed_ones_are(client, stdlib_text):
    upload(client, "first", stdlib_text[:20_000])
    for url in ("/", "/api/corpora"):
        first = client.get(url)
        tag = first.headers["etag"]
        assert first.status_code == 200 and tag.startswith('W/"')
        again = client.get(url, headers={"If-None-Match": tag})
        assert again.status_code == 304 and again.content == b""
        assert again.headers["etag"] == tag and "x-content-type-options" in again.headers
    upload(client, "second", stdlib_text[20_000:40_000])
    changed = client.get("/api/corpora", headers={"If-None-Match": tag})
    assert changed.status_code == 200 and changed.headers["etag"] != tag and len(changed.json()) == 2


def test_job_progress_and_errors_are_never_tagged(client):
    assert "etag" not in client.get("/api/health").headers
    assert "etag" not in client.get("/api/jobs").headers
    assert "etag" not in client.get("/api/corpora/999").headers  # 404


def test_if_none_match_follows_weak_comparison():
    # RFC 9110 section 13.1.2: weak comparison ignores the W/ prefix; "*" matches any current representation.
    assert matches('W/"abc"', 'W/"abc"') and matches('"abc"', 'W/"abc"') and matches("*", 'W/"x"')
    assert matches('"zzz", W/"abc"', 'W/"abc"') and not matches('W/"abd"', 'W/"abc"')
