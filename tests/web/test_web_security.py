"""Cross-site request forgery is decided before a byte of the body is read, and a public permalink is one
page for every anonymous visitor (no CSRF token in it, no cookie set)."""

from __future__ import annotations

import asyncio
import re
import secrets
from collections import Counter

import pytest
from fastapi.testclient import TestClient

from app.config import Settings
from app.main import create_app
from app.store import accounts
from app.web import pages
from tests.web.test_lab_mode import bearer, hidden_csrf, post_text, words_of

BOUNDARY = "lexigrowth-test-boundary"
CHUNK = 64 * 1024
UPLOAD_BYTES = 18 << 20  # the size of the upload the review saw spooled before its 403


def multipart_upload(size: int, fields: dict[str, str]) -> list[bytes]:
    """A multipart upload (``fields`` first, then one text file of ``size`` bytes) in 64 kB chunks."""
    head = "".join(
        f'--{BOUNDARY}\r\nContent-Disposition: form-data; name="{name}"\r\n\r\n{value}\r\n'
        for name, value in fields.items()
    )
    head += (
        f'--{BOUNDARY}\r\nContent-Disposition: form-data; name="files"; filename="big.txt"\r\n'
        "Content-Type: text/plain\r\n\r\n"
    )
    body = head.encode() + (b"word " * (size // 5 + 1))[:size] + f"\r\n--{BOUNDARY}--\r\n".encode()
    return [body[i : i + CHUNK] for i in range(0, len(body), CHUNK)]


def send_raw(app, path: str, headers: dict[str, str], chunks: list[bytes]) -> tuple[int, int, str]:
    """POST ``chunks`` to ``app`` as a server would hand them over; the status, how many body bytes the app
    asked for, and the answer."""
    requested = 0
    answer: dict = {"status": 0, "body": b""}
    pending = list(chunks)

    async def receive():
        nonlocal requested
        if not pending:
            return {"type": "http.disconnect"}
        chunk = pending.pop(0)
        requested += len(chunk)
        return {"type": "http.request", "body": chunk, "more_body": bool(pending)}

    async def send(message):
        if message["type"] == "http.response.start":
            answer["status"] = message["status"]
        elif message["type"] == "http.response.body":
            answer["body"] += message.get("body", b"")

    all_headers = {
        "host": "testserver",
        "content-type": f"multipart/form-data; boundary={BOUNDARY}",
        "content-length": str(sum(map(len, chunks))),
    } | {name.lower(): value for name, value in headers.items()}
    scope = {
        "type": "http",
        "asgi": {"version": "3.0"},
        "http_version": "1.1",
        "method": "POST",
        "scheme": "http",
        "path": path,
        "raw_path": path.encode(),
        "query_string": b"wait=1",
        "root_path": "",
        "headers": [(k.encode(), v.encode()) for k, v in all_headers.items()],
        "client": ("127.0.0.1", 40000),
        "server": ("testserver", 80),
    }
    asyncio.run(app(scope, receive, send))
    return answer["status"], requested, answer["body"].decode(errors="replace")


@pytest.fixture(scope="module")
def lab(tmp_path_factory):
    """A lab-mode app: admin ada (with an API token) uploaded two corpora."""
    app = create_app(Settings(data_dir=tmp_path_factory.mktemp("lab") / "data", load_demo=False))
    password = secrets.token_urlsafe(12)
    accounts.add_account(app.state.engine, "ada", password, is_admin=True)
    token = accounts.new_token(app.state.engine, "ada")
    with TestClient(app) as client:
        ids = [
            post_text(client, name, words_of(a, b), bearer(token)).json()["id"]
            for name, (a, b) in (("Alpha", (0, 1500)), ("Beta", (1500, 3500)))
        ]
        yield app, password, token, ids


def signed_in(app, password: str) -> tuple[TestClient, str, str]:
    """A browser signed in as ada: the client, its session cookie and its CSRF token."""
    browser = TestClient(app)
    form = browser.get("/login")
    answer = browser.post(
        "/login",
        data={"name": "ada", "password": password, "csrf_token": hidden_csrf(form.text)},
        follow_redirects=False,
    )
    assert answer.status_code == 303, answer.text
    token = re.search(r'<meta name="csrf-token" content="([^"]+)">', browser.get("/").text).group(1)
    return browser, answer.headers["set-cookie"].split(";")[0], token


def test_a_cross_site_upload_is_refused_before_its_body_is_read(tmp_path):
    app = create_app(Settings(data_dir=tmp_path / "data", load_demo=False))  # personal mode
    chunks = multipart_upload(UPLOAD_BYTES, {"name": "big"})
    for says in ({"Origin": "http://evil.example"}, {"Sec-Fetch-Site": "cross-site"}):
        status, requested, answer = send_raw(app, "/api/corpora", says, chunks)
        assert (status, requested) == (403, 0) and "another site" in answer


def test_a_session_upload_without_its_token_is_refused_after_its_first_fields(lab):
    # The token is looked for in the form fields before the first file: 18 MB sent, one 64 kB chunk read.
    app, password, _, _ = lab
    _, cookie, token = signed_in(app, password)
    same_site = {"Cookie": cookie, "Origin": "http://testserver"}
    chunks = multipart_upload(UPLOAD_BYTES, {"name": "big"})
    status, requested, answer = send_raw(app, "/api/corpora", same_site, chunks)
    assert status == 403 and "CSRF token" in answer
    assert requested == CHUNK  # of 18 MB
    wrong = multipart_upload(UPLOAD_BYTES, {"csrf_token": token[:-2], "name": "big"})
    assert send_raw(app, "/api/corpora", same_site, wrong)[:2] == (403, CHUNK)


def test_a_form_upload_with_its_token_field_is_stored(lab):
    # The upload form without JavaScript: the token is the form's first field, the files come after it.
    app, password, _, _ = lab
    browser, _, token = signed_in(app, password)
    answer = browser.post(
        "/api/corpora?wait=1",
        data={"csrf_token": token, "name": "By form"},
        files={"files": ("draft.txt", words_of(0, 800).encode(), "text/plain")},
    )
    assert answer.status_code == 201, answer.text
    assert (
        browser.delete(f"/api/corpora/{answer.json()['id']}", headers={"X-CSRF-Token": token}).status_code
        == 204
    )


def test_a_public_permalink_is_rendered_once_for_every_anonymous_visitor(lab, monkeypatch):
    app, _, token, ids = lab
    with TestClient(app) as client:
        saved = client.post("/api/comparisons", json={"corpora": ids, "public": True}, headers=bearer(token))
    assert saved.status_code == 201, saved.text
    renders: Counter = Counter()
    original = pages.templates.env.get_template
    monkeypatch.setattr(
        pages.templates.env,
        "get_template",
        lambda name, *a, **k: renders.update([name]) or original(name, *a, **k),
    )
    answers = [TestClient(app).get(f"/compare/{saved.json()['slug']}") for _ in range(3)]  # 3 visitors
    assert [a.status_code for a in answers] == [200, 200, 200]
    assert renders["compare.html"] == 1
    assert not [a for a in answers if "set-cookie" in a.headers]
    assert "csrf" not in answers[0].text and 'method="post"' not in answers[0].text  # nothing to send
