"""Lab mode through the real app: sign-in gate, sessions, CSRF, API tokens, ownership, public permalinks,
security headers, and escaping of hostile names and words on every page and download.

References: OWASP Cross-Site Request Forgery Prevention Cheat Sheet (synchronizer token), OWASP CSV Injection
(cells starting with =, +, -, @ are prefixed with '), RFC 6265 (cookie attributes), RFC 7914 section 12 (scrypt
test vector), RFC 6234 / hashlib (SHA-256 of API tokens).
"""

from __future__ import annotations

import base64
import csv
import hashlib
import html
import io
import json
import logging
import os
import re
import secrets
import subprocess
import sys
import time
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from functools import lru_cache
from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import text

from app.config import Settings
from app.main import create_app
from app.store import accounts, signins
from app.store import comparisons as saved_comparisons
from app.store import corpora as store
from app.store.corpora import get_corpus
from app.store.db import make_engine
from app.web.security import CONTENT_SECURITY_POLICY, SESSION_COOKIE, SIGN_IN_ALLOWANCE
from tests.conftest import stdlib_docstrings
from tests.store.test_corpora import record

FIGURE_JSON = re.compile(r'<script type="application/json" id="([^"]+)-data">(.*?)</script>', re.S)
HOSTILE = "<script>alert(1)</script>"
# Invented words that only the two lab corpora contain, each many times: the most distinctive words.
MARKERS = ("quillwortian", "bramblecrestic")


@lru_cache(maxsize=1)
def english_words() -> tuple[str, ...]:
    return tuple(re.findall(r"[a-z]+", stdlib_docstrings().lower()))


def words_of(start: int, stop: int) -> str:
    return " ".join(english_words()[start:stop])


def post_text(client: TestClient, name: str, body: str, headers: dict | None = None, **form):
    return client.post(
        "/api/corpora?wait=1",
        data={"name": name, **form},
        files={"files": ("draft.txt", body.encode(), "text/plain")},
        headers=headers or {},
    )


def bearer(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}


def hidden_csrf(page: str) -> str:
    return re.search(r'name="csrf_token" value="([^"]+)"', page).group(1)


@dataclass
class Lab:
    app: object
    data_dir: Path
    passwords: dict[str, str]
    tokens: dict[str, str]
    corpora: list[int]  # uploaded by ben

    def client(self, **kwargs) -> TestClient:
        """A browser of its own (own cookie jar); the app's lifespan is run by the fixture's client."""
        return TestClient(self.app, **kwargs)

    def signed_in(self, name: str) -> tuple[TestClient, str]:
        """A browser signed in as ``name`` through the login form, and its CSRF token."""
        browser = self.client()
        form = browser.get("/login")
        answer = browser.post(
            "/login",
            data={"name": name, "password": self.passwords[name], "csrf_token": hidden_csrf(form.text)},
            follow_redirects=False,
        )
        assert answer.status_code == 303, answer.text
        page = browser.get("/")
        return browser, re.search(r'<meta name="csrf-token" content="([^"]+)">', page.text).group(1)


@pytest.fixture(scope="module")
def lab(tmp_path_factory) -> Lab:
    """A lab-mode app with admin ada and members ben and cleo; ben uploaded two corpora with his API token."""
    data_dir = tmp_path_factory.mktemp("lab") / "data"
    app = create_app(Settings(data_dir=data_dir, load_demo=False, max_upload_mb=5))
    engine = app.state.engine
    passwords = {name: secrets.token_urlsafe(12) for name in ("ada", "ben", "cleo")}
    for name, password in passwords.items():
        accounts.add_account(engine, name, password, is_admin=name == "ada")
    tokens = {name: accounts.new_token(engine, name) for name in passwords}
    with TestClient(app) as client:
        ids = []
        for name, (a, b), marker in (("Alpha", (0, 1500), MARKERS[0]), ("Beta", (1500, 3500), MARKERS[1])):
            body = f"{words_of(a, b)} {' '.join([marker] * 30)}"
            response = post_text(client, name, body, bearer(tokens["ben"]))
            assert response.status_code == 201, response.text
            ids.append(response.json()["id"])
        yield Lab(app, data_dir, passwords, tokens, ids)


# ------------------------------------------------------------------------------------------ personal mode

# Words renamed in both corpora of the personal store: (word counted in the text, hostile spelling). The
# first is markup; the others start with the characters OWASP lists as starting a spreadsheet formula.
HOSTILE_WORDS = [
    ("the", HOSTILE),
    ("of", '=HYPERLINK("http://example.invalid","x")'),
    ("to", "+SUM(1,2)"),
    ("and", "-SUM(1,2)"),
    ("is", "@SUM(1,2)"),
]
HOSTILE_NAMES = [f"=1+1 {HOSTILE}", f"{HOSTILE} two"]


def rename_word(engine, corpus_id: int, old: str, new: str) -> None:
    """Give a counted type another spelling (as another tokenizer or an imported word list could)."""
    with engine.begin() as connection:
        connection.execute(
            text("UPDATE wordcount SET word = :new WHERE corpus_id = :c AND word = :old"),
            {"new": new, "old": old, "c": corpus_id},
        )


@pytest.fixture(scope="module")
def personal(tmp_path_factory):
    """A personal-mode app (no account) with two corpora whose names, labels, profile and words are hostile;
    they were uploaded without any token or CSRF token, as before lab mode existed. The client says where
    its requests come from (``Origin``), as every browser in use does."""
    settings = Settings(data_dir=tmp_path_factory.mktemp("personal") / "data", load_demo=False)
    profile = json.dumps({"name": '<img src=x onerror="alert(2)">', "case_fold": True})
    with TestClient(create_app(settings), headers={"Origin": "http://testserver"}) as client:
        ids = []
        for name, (a, b) in zip(HOSTILE_NAMES, ((0, 2000), (2000, 4500)), strict=True):
            answer = post_text(client, name, words_of(a, b), labels=f"author={HOSTILE}", profile=profile)
            assert answer.status_code == 201, answer.text
            ids.append(answer.json()["id"])
        for cid in ids:
            for old, new in HOSTILE_WORDS:
                rename_word(client.app.state.engine, cid, old, new)
        yield client, ids


def test_personal_mode_has_no_sign_in_but_its_forms_carry_a_csrf_token(personal):
    client, ids = personal
    script = TestClient(client.app)  # no cookie, no Origin: curl or httpx
    assert script.post("/api/comparisons", json={"corpora": ids}).status_code == 201
    browser = TestClient(client.app)  # its own cookie jar
    page = browser.get("/")
    assert page.status_code == 200 and "Sign in" not in page.text
    assert "lexigrowth_session=" in page.headers["set-cookie"]
    token = re.search(r'<meta name="csrf-token" content="([^"]+)">', page.text).group(1)
    assert hidden_csrf(browser.get("/upload").text) == token
    assert browser.get("/login", follow_redirects=False).headers["location"] == "/"
    # With the cookie but neither Origin nor Sec-Fetch-Site (a browser too old to send them), the token
    # is needed; a request that says it comes from this site needs none.
    missing = browser.post("/api/comparisons", json={"corpora": ids})
    assert missing.status_code == 403 and "CSRF token" in missing.json()["detail"]
    assert browser.post("/api/comparisons", json={"corpora": ids}, headers={"X-CSRF-Token": token}).is_success
    same_site = {"Origin": "http://testserver", "Sec-Fetch-Site": "same-origin"}
    assert browser.post("/api/comparisons", json={"corpora": ids}, headers=same_site).status_code == 201


def test_security_headers_on_every_response(personal):
    client, _ = personal
    for path in (
        "/",
        "/upload",
        "/api/corpora",
        "/static/style.css",
        "/api/corpora/99",
        "/nowhere",
        "/login",
    ):
        headers = client.get(path).headers
        assert headers["content-security-policy"] == CONTENT_SECURITY_POLICY, path
        assert headers["x-content-type-options"] == "nosniff"
        assert headers["referrer-policy"] == "same-origin"
        assert headers["x-frame-options"] == "DENY"
    policy = dict(part.split(" ", 1) for part in CONTENT_SECURITY_POLICY.split("; "))
    assert policy["script-src"] == "'self'" and "unsafe" not in CONTENT_SECURITY_POLICY
    # the one inline-style hash allowed is that of the empty string (plotly fills an empty <style>)
    empty = base64.b64encode(hashlib.sha256(b"").digest()).decode()
    assert policy["style-src"] == f"'self' 'sha256-{empty}'"


def test_pages_have_no_inline_scripts_styles_or_handlers(personal):
    client, ids = personal
    slug = client.post("/api/comparisons", json={"corpora": ids}).json()["slug"]
    for path in ("/", "/upload", f"/corpora/{ids[0]}", f"/compare/{slug}", "/estimate?tokens=1000&types=300"):
        page = client.get(path).text
        assert not re.search(r"<script(?![^>]*(src=|type=\"application/json\"))", page), path
        assert "<style" not in page and " style=" not in page, path
        assert not re.search(r"<[a-z][^>]*\son[a-z]+\s*=", page), path  # no event-handler attribute


def test_documentation_page_is_served_entirely_by_the_app(client):
    page = client.get("/docs")
    assert page.status_code == 200
    assert not re.findall(r"<script>(.*?)</script>", page.text, re.S)  # no inline script
    sources = re.findall(r'(?:src|href)="([^"]+)"', page.text)
    assert len(sources) == 5 and all(  # icon, style sheet, the link back to the dashboard, two scripts
        source.startswith("/") and not source.startswith("//") for source in sources
    )
    for source in sources:
        assert client.get(source).status_code == 200, source
    policy = page.headers["content-security-policy"]
    assert "script-src 'self';" in policy and "http" not in policy
    assert client.get("/openapi.json").status_code == 200
    assert client.get("/redoc").status_code == 404  # ReDoc would need its CDN: not offered
    assert "/" in sources and "/static/favicon.svg" in sources  # a way back, and an icon
    icon = client.get("/favicon.ico")  # what a browser asks for on pages that name no icon
    assert icon.status_code == 200 and icon.headers["content-type"].startswith("image/svg+xml")


# ----------------------------------------------------------------------------------------------- gate


def test_anonymous_requests_are_refused_or_sent_to_sign_in(lab):
    anonymous = lab.client()
    page = anonymous.get("/corpora/1?q=the", follow_redirects=False)
    assert page.status_code == 303 and page.headers["location"] == "/login?next=/corpora/1%3Fq%3Dthe"
    for path in ("/", "/upload", "/estimate", "/compare?corpus=1&corpus=2", "/docs"):
        assert anonymous.get(path, follow_redirects=False).headers["location"].startswith("/login"), path
    for method, path in (
        ("GET", "/api/corpora"),
        ("GET", "/api/corpora/1/words"),
        ("GET", "/api/corpora/1/words.csv"),
        ("GET", "/openapi.json"),
        ("POST", "/api/estimate"),
        ("DELETE", "/api/corpora/1"),
    ):
        response = anonymous.request(method, path)
        assert response.status_code == 401, (method, path)
        assert response.headers["www-authenticate"] == "Bearer" and "sign in" in response.json()["detail"]
    assert anonymous.get("/api/health").json()["status"] == "ok"
    assert anonymous.get("/static/style.css").status_code == 200
    assert anonymous.get("/static/vendor/plotly-basic.min.js").status_code == 200
    login = anonymous.get("/login")
    assert login.status_code == 200 and "Sign in" in login.text
    assert get_corpus(lab.app.state.engine, lab.corpora[0]).owner_id is not None  # nothing was deleted


def test_sign_in_with_right_and_wrong_password_and_sign_out(lab):
    browser = lab.client()
    form = browser.get("/login?next=/upload")
    cookie = form.headers["set-cookie"]
    assert cookie.startswith(f"{SESSION_COOKIE}=") and "HttpOnly" in cookie and "SameSite=Lax" in cookie
    assert "Secure" not in cookie  # plain HTTP
    fields = {"name": "ben", "csrf_token": hidden_csrf(form.text), "next": "/upload"}
    for name, password in (("ben", lab.passwords["cleo"]), ("nobody", lab.passwords["ben"]), ("ben", "")):
        wrong = browser.post(
            "/login", data=fields | {"name": name, "password": password}, follow_redirects=False
        )
        assert wrong.status_code in (401, 422)
    wrong = browser.post(
        "/login", data=fields | {"password": lab.passwords["ben"] + "x"}, follow_redirects=False
    )
    assert wrong.status_code == 401 and "Wrong name or password." in wrong.text
    assert browser.get("/", follow_redirects=False).status_code == 303  # still not signed in

    right = browser.post("/login", data=fields | {"password": lab.passwords["ben"]}, follow_redirects=False)
    assert right.status_code == 303 and right.headers["location"] == "/upload"
    page = browser.get("/upload")
    assert page.status_code == 200 and 'class="member-name"' in page.text and ">ben</span>" in page.text
    assert browser.get("/api/corpora").status_code == 200  # the session works for the JSON API too

    out = browser.post("/logout", data={"csrf_token": hidden_csrf(page.text)}, follow_redirects=False)
    assert out.status_code == 303 and "Max-Age=0" in out.headers["set-cookie"]
    assert browser.get("/", follow_redirects=False).status_code == 303


def sign_in_attempt(browser: TestClient, name: str, password: str):
    form = browser.get("/login")
    return browser.post(
        "/login",
        data={"name": name, "password": password, "csrf_token": hidden_csrf(form.text)},
        follow_redirects=False,
    )


def test_repeated_failed_sign_ins_slow_the_guesser_but_not_the_member(lab):
    # OWASP Authentication Cheat Sheet: throttle failed attempts, without letting an attacker lock an
    # account out (per name and address, exponential back-off).
    engine = lab.app.state.engine
    guessing = lab.client(client=("198.51.100.7", 40000))
    for attempt in range(SIGN_IN_ALLOWANCE.pair):
        assert sign_in_attempt(guessing, "cleo", f"guess {attempt}").status_code == 401
    refused = sign_in_attempt(guessing, "Cleo", lab.passwords["cleo"])  # even the right password waits
    assert refused.status_code == 429 and "Too many failed sign-ins" in refused.text
    assert 0 < int(refused.headers["retry-after"]) <= 2
    # cleo herself, from her own address, is not locked out
    assert (
        sign_in_attempt(lab.client(client=("203.0.113.5", 40000)), "cleo", lab.passwords["cleo"]).status_code
        == 303
    )
    # each further attempt (the refused one above was the 6th) doubles the wait (counted in the store, so
    # every server process sees it)
    another_process = create_app(Settings(data_dir=lab.data_dir, load_demo=False))
    with TestClient(another_process, client=("198.51.100.7", 40000)) as other:
        assert sign_in_attempt(other, "cleo", lab.passwords["cleo"]).status_code == 429
    now = datetime.now(UTC)
    waits = [round(signins.attempt(engine, "cleo", "198.51.100.7", SIGN_IN_ALLOWANCE, now)) for _ in range(4)]
    assert waits == [8, 16, 32, 64]  # the 8th to the 11th attempt: 2 s x 2^(attempts so far - 5)
    later = now + timedelta(hours=25)  # forgotten after a day
    assert signins.attempt(engine, "cleo", "198.51.100.7", SIGN_IN_ALLOWANCE, later) == 0
    signins.clear(engine, "cleo")


def test_many_names_from_one_address_are_slowed(lab):
    sweeping = lab.client(client=("198.51.100.9", 40000))
    for attempt in range(SIGN_IN_ALLOWANCE.address):
        assert sign_in_attempt(sweeping, f"member{attempt}", "password").status_code == 401
    assert sign_in_attempt(sweeping, "ben", lab.passwords["ben"]).status_code == 429
    assert sign_in_attempt(lab.client(), "ben", lab.passwords["ben"]).status_code == 303  # elsewhere: fine
    signins.clear(lab.app.state.engine, address="198.51.100.9")


def test_sign_out_ends_the_session_for_a_copied_cookie_too(lab):
    browser, csrf = lab.signed_in("cleo")
    copy = lab.client()
    copy.cookies.set(SESSION_COOKIE, browser.cookies[SESSION_COOKIE])
    assert copy.get("/", follow_redirects=False).status_code == 200  # the copy works while signed in
    assert browser.post("/logout", data={"csrf_token": csrf}, follow_redirects=False).status_code == 303
    assert copy.get("/", follow_redirects=False).status_code == 303  # ... and not after sign-out
    before = len(store.list_corpora(lab.app.state.engine))
    stolen = copy.post(
        "/api/corpora?wait=1",
        data={"name": "after sign-out"},
        files={"files": ("a.txt", b"some words here", "text/plain")},
        headers={"X-CSRF-Token": csrf},
    )
    assert stolen.status_code == 401
    assert len(store.list_corpora(lab.app.state.engine)) == before
    # the same in another server process on the same store
    with TestClient(create_app(Settings(data_dir=lab.data_dir, load_demo=False))) as other:
        other.cookies.set(SESSION_COOKIE, browser.cookies.get(SESSION_COOKIE) or copy.cookies[SESSION_COOKIE])
        assert other.get("/", follow_redirects=False).status_code == 303


def test_password_change_ends_every_session_and_revokes_tokens_when_asked(lab):
    engine = lab.app.state.engine
    first, _ = lab.signed_in("cleo")
    second, _ = lab.signed_in("cleo")
    token = accounts.new_token(engine, "cleo")
    change = accounts.set_password(engine, "cleo", lab.passwords["cleo"])
    assert change.sessions_ended >= 2 and change.tokens_revoked == 0 and change.tokens_kept >= 1
    for browser in (first, second):
        assert browser.get("/", follow_redirects=False).status_code == 303
    assert lab.client().get("/api/corpora", headers=bearer(token)).status_code == 200  # kept: still works
    change = accounts.set_password(engine, "cleo", lab.passwords["cleo"], revoke_tokens=True)
    assert change.tokens_revoked >= 1 and change.tokens_kept == 0
    assert lab.client().get("/api/corpora", headers=bearer(token)).status_code == 401
    lab.tokens["cleo"] = accounts.new_token(engine, "cleo")  # for the tests that follow


def test_password_page_changes_the_password_and_says_what_it_did(lab):
    engine = lab.app.state.engine
    accounts.add_account(engine, "elio", "first password")
    lab.passwords["elio"] = "first password"
    token = accounts.new_token(engine, "elio")
    elsewhere, _ = lab.signed_in("elio")
    browser, _ = lab.signed_in("elio")
    form = browser.get("/account/password")
    assert form.status_code == 200 and 'id="revoke-tokens"' in form.text and "1 API token" in form.text
    fields = {"csrf_token": hidden_csrf(form.text), "new": "second password", "repeat": "second password"}
    wrong = browser.post("/account/password", data=fields | {"current": "not it"})
    assert wrong.status_code == 401 and "current password is wrong" in wrong.text
    assert accounts.authenticate(engine, "elio", "first password") is not None  # nothing changed
    differ = browser.post("/account/password", data=fields | {"current": "first password", "repeat": "other"})
    assert differ.status_code == 422 and accounts.authenticate(engine, "elio", "first password") is not None

    kept = browser.post("/account/password", data=fields | {"current": "first password"})
    assert kept.status_code == 200
    assert (
        "Password changed. 1 other signed-in session ended. 1 API token kept: they still work." in kept.text
    )
    assert elsewhere.get("/", follow_redirects=False).status_code == 303  # the other browser is signed out
    assert browser.get("/", follow_redirects=False).status_code == 200  # this one has a new session
    assert lab.client().get("/api/corpora", headers=bearer(token)).status_code == 200

    again = {"csrf_token": hidden_csrf(kept.text), "current": "second password", "new": "third password"}
    revoked = browser.post(
        "/account/password", data=again | {"repeat": "third password", "revoke_tokens": "true"}
    )
    assert "Password changed. 0 other signed-in sessions ended. 1 API token revoked." in revoked.text
    assert lab.client().get("/api/corpora", headers=bearer(token)).status_code == 401
    assert accounts.authenticate(engine, "elio", "third password") is not None


@pytest.mark.parametrize(
    "target", ["//evil.example/x", "https://evil.example", "/\\evil.example", "javascript:x"]
)
def test_sign_in_never_redirects_to_another_site(lab, target):
    browser = lab.client()
    form = browser.get("/login")
    answer = browser.post(
        "/login",
        data={
            "name": "cleo",
            "password": lab.passwords["cleo"],
            "csrf_token": hidden_csrf(form.text),
            "next": target,
        },
        follow_redirects=False,
    )
    assert answer.status_code == 303 and answer.headers["location"] == "/"


def test_session_cookie_is_secure_over_https_and_forwarded_headers_are_not_read_by_the_app(lab):
    assert "; Secure" in lab.client(base_url="https://testserver").get("/login").headers["set-cookie"]
    # X-Forwarded-Proto is uvicorn's to believe (from LEXIGROWTH_TRUSTED_PROXIES only, see
    # tests/safety/test_web_security.py), never the app's
    forwarded = {"X-Forwarded-Proto": "https"}
    assert "Secure" not in lab.client().get("/login", headers=forwarded).headers["set-cookie"]


def test_forged_or_stale_sessions_are_not_accepted(lab):
    browser, _ = lab.signed_in("cleo")
    value = browser.cookies[SESSION_COOKIE]
    timestamp, signature = value.rsplit(".", 2)[1:]
    # cleo's signature on a session that claims to be the admin's (as cookies of an older version did)
    admin = accounts.member_by_token(lab.app.state.engine, lab.tokens["ada"])
    claims = {"uid": admin.id, "stamp": admin.password_stamp, "csrf": "x"}
    forged = base64.urlsafe_b64encode(json.dumps(claims).encode()).decode().rstrip("=")
    intruder = lab.client()
    intruder.cookies.set(SESSION_COOKIE, f"{forged}.{timestamp}.{signature}")
    assert intruder.get("/", follow_redirects=False).status_code == 303  # the signature does not match

    other_key = create_app(Settings(data_dir=lab.data_dir, load_demo=False, secret_key="x" * 40))
    stranger = TestClient(other_key)
    stranger.cookies.set(SESSION_COOKIE, value)
    assert stranger.get("/", follow_redirects=False).status_code == 303  # signed with another key

    accounts.set_password(lab.app.state.engine, "cleo", lab.passwords["cleo"])  # same password, new salt
    assert browser.get("/", follow_redirects=False).status_code == 303  # the old session has ended


def test_secret_key_file_is_private_and_reused(lab):
    key = lab.data_dir / "secret_key"
    assert key.stat().st_mode & 0o777 == 0o600 and len(key.read_text()) >= 32
    before = key.read_text()
    key.chmod(0o644)
    create_app(Settings(data_dir=lab.data_dir, load_demo=False))
    assert key.read_text() == before and key.stat().st_mode & 0o777 == 0o600
    with pytest.raises(RuntimeError, match="at least 32 characters"):
        create_app(Settings(data_dir=lab.data_dir, load_demo=False, secret_key="too short"))


# ----------------------------------------------------------------------------------------------- CSRF


def test_csrf_missing_or_wrong_is_refused_on_forms_and_api_calls(lab):
    browser, csrf = lab.signed_in("ben")
    form = {"corpus": [str(i) for i in lab.corpora]}
    for sent in ({}, {"csrf_token": "wrong"}, {"csrf_token": ""}):
        refused = browser.post("/compare", data=form | sent, follow_redirects=False)
        assert refused.status_code == 403 and "CSRF" in refused.text
    saved = browser.post("/compare", data=form | {"csrf_token": csrf}, follow_redirects=False)
    assert saved.status_code == 303 and saved.headers["location"].startswith("/compare/")

    body = {"corpora": lab.corpora}
    for headers in (
        {},
        {"X-CSRF-Token": "wrong"},
        {"X-CSRF-Token": csrf[:-1]},
        {"X-CSRF-Token": "é".encode("latin-1")},
    ):
        assert browser.post("/api/comparisons", json=body, headers=headers).status_code == 403
    assert browser.post("/api/comparisons", json=body, headers={"X-CSRF-Token": csrf}).status_code == 201
    assert post_text(browser, "no token", words_of(0, 100)).status_code == 403
    assert browser.delete(f"/api/corpora/{lab.corpora[0]}").status_code == 403
    assert get_corpus(lab.app.state.engine, lab.corpora[0]).id == lab.corpora[0]

    # another member's token does not fit this session
    _, other = lab.signed_in("cleo")
    assert browser.post("/api/comparisons", json=body, headers={"X-CSRF-Token": other}).status_code == 403
    # and the sign-in form itself needs the anonymous session's token
    assert (
        lab.client().post("/login", data={"name": "ben", "password": lab.passwords["ben"]}).status_code == 403
    )


def test_api_token_works_without_csrf_and_a_bad_one_is_refused(lab):
    token = bearer(lab.tokens["cleo"])
    client = lab.client()
    assert client.get("/api/corpora", headers=token).status_code == 200
    assert client.get(f"/corpora/{lab.corpora[0]}", headers=token).status_code == 200
    created = client.post("/api/comparisons", json={"corpora": lab.corpora}, headers=token)
    assert created.status_code == 201 and "set-cookie" not in created.headers
    for wrong in (bearer(lab.tokens["cleo"] + "x"), {"Authorization": lab.tokens["cleo"]}, bearer("")):
        refused = client.get("/api/corpora", headers=wrong)
        assert refused.status_code == 401 and refused.json()["detail"] == "unknown or revoked API token"

    spare = accounts.new_token(lab.app.state.engine, "cleo")
    assert client.get("/api/corpora", headers=bearer(spare)).status_code == 200
    with lab.app.state.engine.connect() as connection:
        stored = set(connection.execute(text("SELECT token_hash FROM apitoken")).scalars())
    # reference: hashlib's SHA-256 (FIPS 180-4); the token itself is not in the store
    assert hashlib.sha256(spare.encode()).hexdigest() in stored and spare not in stored


# ------------------------------------------------------------------------------------------ ownership


def test_each_member_gets_a_page_of_their_own_from_the_kept_pages(lab):
    """Pages are kept rendered per viewer: a member never receives a page made for another (their name,
    their edit rights, the CSRF token of their forms)."""
    pages = {}
    for name in ("ben", "cleo", "ben"):
        browser, csrf = lab.signed_in(name)
        for _ in range(2):  # the second view is the kept page
            page = browser.get(f"/corpora/{lab.corpora[0]}").text
            assert f'<span class="member-name" title="member">{name}</span>' in page
            assert hidden_csrf(page) == csrf
        pages.setdefault(name, []).append(page)
    # ben owns the corpus: only his page offers to rename it
    assert all('action="/corpora/' in p and "/edit" in p for p in pages["ben"])
    assert "/edit" not in pages["cleo"][0]
    # ben's second session has a new CSRF token, so a page of its own
    assert hidden_csrf(pages["ben"][0]) != hidden_csrf(pages["ben"][1])


def test_only_the_owner_or_an_admin_deletes_a_corpus(lab):
    engine = lab.app.state.engine
    ben = bearer(lab.tokens["ben"])
    client = lab.client()
    owner = accounts.member_by_token(engine, lab.tokens["ben"]).id
    assert [get_corpus(engine, cid).owner_id for cid in lab.corpora] == [owner, owner]  # set by the upload
    first, second, orphan = (
        store.save_corpus(engine, record(name)) for name in ("first", "second", "orphan")
    )
    for cid in (first, second):
        accounts.set_corpus_owner(engine, cid, owner)

    refused = client.delete(f"/api/corpora/{first}", headers=bearer(lab.tokens["cleo"]))
    assert refused.status_code == 403 and "admin" in refused.json()["detail"]
    assert client.get(f"/api/corpora/{first}", headers=ben).status_code == 200
    assert client.delete(f"/api/corpora/{first}", headers=ben).status_code == 204  # the owner

    admin, csrf = lab.signed_in("ada")
    assert admin.delete(f"/api/corpora/{second}", headers={"X-CSRF-Token": csrf}).status_code == 204
    assert client.get(f"/api/corpora/{second}", headers=ben).status_code == 404

    # a corpus without an owner (command line, demo, or counted before lab mode): admins only
    assert get_corpus(engine, orphan).owner_id is None
    assert client.delete(f"/api/corpora/{orphan}", headers=ben).status_code == 403
    assert client.delete(f"/api/corpora/{orphan}", headers=bearer(lab.tokens["ada"])).status_code == 204


# ----------------------------------------------------------------------------------------- permalinks


def test_public_permalink_is_visible_without_sign_in_and_shows_no_words(lab):
    member, csrf = lab.signed_in("ben")
    compare_page = member.get("/compare", params={"corpus": lab.corpora})
    assert 'name="public"' in compare_page.text  # the checkbox of the save form
    saved = member.post(
        "/compare",
        data={"corpus": [str(i) for i in lab.corpora], "public": "true", "csrf_token": csrf},
        follow_redirects=False,
    )
    slug = saved.headers["location"].rsplit("/", 1)[1]
    by_api = member.post(
        "/api/comparisons", json={"corpora": lab.corpora, "public": True}, headers={"X-CSRF-Token": csrf}
    ).json()["slug"]

    full = member.get(f"/api/comparisons/{slug}").json()
    shown = [w["word"] for w in full["distinctive"]["words"]]
    assert set(MARKERS) <= set(shown) and full["public"] is True
    assert all(marker in member.get(f"/compare/{slug}").text for marker in MARKERS)

    visitor = lab.client()
    for key in (slug, by_api):
        page = visitor.get(f"/compare/{key}")
        assert page.status_code == 200 and 'id="size-matched-table"' in page.text
        assert 'id="distinctive-table"' not in page.text and 'id="words-hidden"' in page.text
        assert not any(word in page.text for word in MARKERS)
        assert "distinctive.csv" not in page.text and 'href="/corpora/' not in page.text
        assert FIGURE_JSON.findall(page.text)  # the plots are there
        data = visitor.get(f"/api/comparisons/{key}").json()
        assert data["distinctive"]["words"] == [] and data["distinctive"]["words_hidden"] is True
        assert data["size_matched"] == full["size_matched"]  # the same corpora and default settings
        assert not any(word in json.dumps(data) for word in MARKERS)
        assert visitor.get(f"/api/comparisons/{key}/table.csv").status_code == 200
        assert visitor.get(f"/api/comparisons/{key}/distinctive.csv").status_code == 401
    assert visitor.get(f"/corpora/{lab.corpora[0]}", follow_redirects=False).status_code == 303
    assert visitor.get(f"/api/corpora/{lab.corpora[0]}/words.csv").status_code == 401
    assert visitor.post("/compare", data={"corpus": ["1", "2"]}, follow_redirects=False).status_code == 303


def test_a_member_publishes_only_their_own_corpora(lab):
    engine = lab.app.state.engine
    cleo, csrf = lab.signed_in("cleo")
    before = len(lab_comparisons(engine))
    refused = cleo.post(
        "/api/comparisons", json={"corpora": lab.corpora, "public": True}, headers={"X-CSRF-Token": csrf}
    )
    assert refused.status_code == 403 and "only corpora you uploaded" in refused.json()["detail"]
    page = cleo.post(
        "/compare",
        data={"corpus": [str(i) for i in lab.corpora], "public": "true", "csrf_token": csrf},
        follow_redirects=False,
    )
    assert page.status_code == 403
    assert len(lab_comparisons(engine)) == before  # nothing saved
    members_only = cleo.post(
        "/api/comparisons", json={"corpora": lab.corpora}, headers={"X-CSRF-Token": csrf}
    )
    assert members_only.status_code == 201  # members-only is fine
    slug = members_only.json()["slug"]
    publish = cleo.patch(f"/api/comparisons/{slug}", json={"public": True}, headers={"X-CSRF-Token": csrf})
    assert publish.status_code == 403  # and so is publishing it afterwards
    admin = bearer(lab.tokens["ada"])
    assert (
        lab.client().patch(f"/api/comparisons/{slug}", json={"public": True}, headers=admin).status_code
        == 200
    )


def test_publishing_checks_the_corpora_as_saved_not_the_ids_of_today(lab):
    """Member cleo saves a comparison of her corpus and ben's; ben deletes his; publishing must still be
    refused, and so when his id is given to a corpus of cleo's (as SQLite reused ids before 0006)."""
    engine = lab.app.state.engine
    cleo, csrf = lab.signed_in("cleo")
    ben = bearer(lab.tokens["ben"])
    own = post_text(cleo, "Cleo's notes", words_of(0, 1200), {"X-CSRF-Token": csrf}).json()["id"]
    embargoed = post_text(
        lab.client(), "Ben's embargoed draft", words_of(1200, 2600), ben, labels="status=embargoed"
    ).json()["id"]
    saved = cleo.post("/api/comparisons", json={"corpora": [own, embargoed]}, headers={"X-CSRF-Token": csrf})
    assert saved.status_code == 201
    slug = saved.json()["slug"]
    publish = {"json": {"public": True}, "headers": {"X-CSRF-Token": csrf}}
    assert cleo.patch(f"/api/comparisons/{slug}", **publish).status_code == 403

    assert lab.client().delete(f"/api/corpora/{embargoed}", headers=ben).status_code == 204
    refused = cleo.patch(f"/api/comparisons/{slug}", **publish)
    assert refused.status_code == 403 and "deleted or replaced" in refused.json()["detail"]
    assert lab.client().get(f"/api/comparisons/{slug}").status_code == 401  # still members-only

    newer = post_text(cleo, "Cleo's second", words_of(2600, 3800), {"X-CSRF-Token": csrf}).json()["id"]
    assert newer > embargoed  # ids are never given twice
    with engine.begin() as connection:  # an id given again (as a store before 0006 could): still refused
        for statement in (
            "CREATE TEMP TABLE reused AS SELECT * FROM corpus WHERE id = :new",
            "UPDATE reused SET id = :old",
            "INSERT INTO corpus SELECT * FROM reused",
            "DROP TABLE reused",
        ):
            connection.execute(text(statement), {"old": embargoed, "new": newer})
    assert get_corpus(engine, embargoed).owner_id == get_corpus(engine, own).owner_id
    assert cleo.patch(f"/api/comparisons/{slug}", **publish).status_code == 403
    assert (
        lab.client()
        .patch(f"/api/comparisons/{slug}", json={"public": True}, headers=bearer(lab.tokens["ada"]))
        .status_code
        == 403
    )
    assert not saved_comparisons.is_public(engine, slug)
    for corpus in (own, embargoed, newer):
        assert (
            lab.client().delete(f"/api/corpora/{corpus}", headers=bearer(lab.tokens["ada"])).status_code
            == 204
        )


def lab_comparisons(engine) -> list[str]:
    with engine.connect() as connection:
        return list(connection.execute(text("SELECT slug FROM savedcomparison")).scalars())


def test_public_permalink_has_no_content_hash_and_can_be_unpublished_and_deleted(lab):
    ben = bearer(lab.tokens["ben"])
    member = lab.client()
    slug = member.post("/api/comparisons", json={"corpora": lab.corpora, "public": True}, headers=ben).json()[
        "slug"
    ]
    visitor = lab.client()
    hashes = [get_corpus(lab.app.state.engine, cid).content_hash for cid in lab.corpora]
    for path in (f"/compare/{slug}", f"/api/comparisons/{slug}", f"/api/comparisons/{slug}/table.csv"):
        shown = visitor.get(path)
        assert shown.status_code == 200 and not any(h in shown.text for h in hashes), path
    assert "content_hash" not in visitor.get(f"/api/comparisons/{slug}").json()["corpora"][0]

    # another member may neither unpublish nor delete it
    cleo = bearer(lab.tokens["cleo"])
    assert member.patch(f"/api/comparisons/{slug}", json={"public": False}, headers=cleo).status_code == 403
    assert member.delete(f"/api/comparisons/{slug}", headers=cleo).status_code == 403
    assert visitor.get(f"/compare/{slug}").status_code == 200

    # the creator unpublishes from the page (the buttons are shown to the creator only)
    browser, csrf = lab.signed_in("ben")
    page = browser.get(f"/compare/{slug}")
    assert 'id="unpublish"' in page.text and 'id="delete-permalink"' in page.text
    other, _ = lab.signed_in("cleo")
    assert 'id="unpublish"' not in other.get(f"/compare/{slug}").text
    answer = browser.post(f"/compare/{slug}/visibility", data={"csrf_token": csrf}, follow_redirects=False)
    assert answer.status_code == 303
    assert visitor.get(f"/compare/{slug}", follow_redirects=False).status_code == 303  # to sign-in now
    assert visitor.get(f"/api/comparisons/{slug}").status_code == 401
    assert 'id="publish"' in browser.get(f"/compare/{slug}").text
    assert (
        member.patch(f"/api/comparisons/{slug}", json={"public": True}, headers=ben).json()["public"] is True
    )

    # and deletes it, once confirmed; then it is gone for everyone
    unconfirmed = browser.post(f"/compare/{slug}/delete", data={"csrf_token": csrf}, follow_redirects=False)
    assert unconfirmed.status_code == 422 and browser.get(f"/compare/{slug}").status_code == 200
    confirmed = {"csrf_token": csrf, "confirm": "yes"}
    assert browser.post(f"/compare/{slug}/delete", data=confirmed, follow_redirects=False).status_code == 303
    assert member.get(f"/api/comparisons/{slug}", headers=ben).status_code == 404
    assert visitor.get(f"/compare/{slug}", follow_redirects=False).status_code == 303
    second = member.post("/api/comparisons", json={"corpora": lab.corpora}, headers=ben).json()["slug"]
    assert member.delete(f"/api/comparisons/{second}", headers=bearer(lab.tokens["ada"])).status_code == 204
    assert member.delete(f"/api/comparisons/{second}", headers=ben).status_code == 404


def test_members_only_permalink_is_not_visible_anonymously(lab):
    member, csrf = lab.signed_in("ben")
    slug = member.post(
        "/api/comparisons", json={"corpora": lab.corpora}, headers={"X-CSRF-Token": csrf}
    ).json()["slug"]
    assert member.get(f"/api/comparisons/{slug}").json()["public"] is False
    other_member, _ = lab.signed_in("cleo")
    assert MARKERS[0] in other_member.get(f"/compare/{slug}").text  # members see everything

    visitor = lab.client()
    unknown = "A" * 16
    for key in (slug, unknown):  # a private and a missing permalink look the same from outside
        page = visitor.get(f"/compare/{key}", follow_redirects=False)
        assert page.status_code == 303 and page.headers["location"] == f"/login?next=/compare/{key}"
        for suffix in ("", "/table.csv", "/distinctive.csv"):
            assert visitor.get(f"/api/comparisons/{key}{suffix}").status_code == 401


# ------------------------------------------------------------------------------------------- passwords


def test_password_is_never_logged_nor_stored_in_clear(lab, caplog):
    caplog.set_level(logging.DEBUG)
    password = secrets.token_urlsafe(16)
    accounts.add_account(lab.app.state.engine, "dora", password)
    browser = lab.client()
    form = hidden_csrf(browser.get("/login").text)
    browser.post("/login", data={"name": "dora", "password": password[::-1], "csrf_token": form})
    browser.post("/login", data={"name": "dora", "password": password, "csrf_token": form})
    assert browser.get("/").status_code == 200
    assert caplog.records and "dora signed in" in caplog.text and "failed sign-in" in caplog.text
    assert password not in caplog.text and password[::-1] not in caplog.text

    with lab.app.state.engine.connect() as connection:
        stored = connection.execute(
            text("SELECT password_hash FROM account WHERE name = 'dora'")
        ).scalar_one()
    scheme, n, r, p, salt, key = stored.split("$")
    assert (scheme, n, r, p) == ("scrypt", str(2**14), "8", "1") and len(base64.b64decode(salt)) == 16
    # reference: hashlib.scrypt (OpenSSL's RFC 7914 implementation) recomputes the stored key
    expected = hashlib.scrypt(password.encode(), salt=base64.b64decode(salt), n=2**14, r=8, p=1, dklen=32)
    assert base64.b64decode(key) == expected
    for file in lab.data_dir.glob("lexigrowth.sqlite3*"):  # the database, its WAL and shared memory
        assert password.encode() not in file.read_bytes(), file


def test_scrypt_verification_against_the_rfc_7914_test_vector():
    # RFC 7914 section 12, third vector: P="pleaseletmein", S="SodiumChloride", N=16384, r=8, p=1, dkLen=64
    # (digits as printed there, copied from memory; a wrong digit would fail the check below).
    key = bytes.fromhex(
        "7023bdcb3afd7348461c06cd81fd38ebfda8fbba904f8e3ea9b543f6545da1f2"
        "d5432955613f0fcf62d49705242a9af9e61e85dc0d651e40dfcf017b45575887"
    )
    stored = (
        f"scrypt$16384$8$1${base64.b64encode(b'SodiumChloride').decode()}${base64.b64encode(key).decode()}"
    )
    assert accounts.verify_password("pleaseletmein", stored)
    assert not accounts.verify_password("pleaseletmeout", stored)
    assert not accounts.verify_password("pleaseletmein", stored.replace("scrypt$", "bcrypt$"))
    assert not accounts.verify_password("pleaseletmein", "scrypt$16384$8$1$not base64$x")
    first, second = accounts.hash_password("same"), accounts.hash_password("same")
    assert (
        first != second
        and accounts.verify_password("same", first)
        and accounts.verify_password("same", second)
    )


# ---------------------------------------------------------------------------------- script injection


def figures(page: str) -> dict[str, object]:
    found = {}
    for name, body in FIGURE_JSON.findall(page):
        assert "<" not in body and ">" not in body, name  # nothing can close the <script> element
        found[name] = json.loads(body)
    return found


def test_hostile_names_labels_and_words_are_text_on_every_page_and_neutral_in_csv(personal):
    client, ids = personal
    escaped = html.escape(HOSTILE)
    slug = client.post("/api/comparisons", json={"corpora": ids, "limit": 5000}).json()["slug"]
    pages = {
        "library": client.get("/").text,
        "corpus": client.get(f"/corpora/{ids[0]}", params={"q": "script"}).text,
        "live comparison": client.get("/compare", params={"corpus": ids, "limit": "5000"}).text,
        "saved comparison": client.get(f"/compare/{slug}").text,
    }
    for where, page in pages.items():
        assert HOSTILE not in page and "<img src=x" not in page, where
        assert escaped in page, where
        figures(page)
    assert pages["corpus"].count(f"<td>{escaped}</td>") == 1  # the word itself in the word list
    for where in ("live comparison", "saved comparison"):
        distinctive = re.search(r'<table[^>]*id="distinctive-table".*?</table>', pages[where], re.S).group(0)
        assert f"<td>{escaped}</td>" in distinctive, where
        legend = [t["name"] for t in figures(pages[where])["growth-plot"]["data"] if "name" in t]
        for name in HOSTILE_NAMES:  # plotly.js shows entities literally: the name is text in the legend
            assert any(html.unescape(shown).startswith(name) for shown in legend), (where, name)

    # downloads: every cell that starts like a formula gets an apostrophe in front, nothing else changes
    words = dict(csv.reader(io.StringIO(client.get(f"/api/corpora/{ids[0]}/words.csv").text)))
    table = list(csv.DictReader(io.StringIO(client.get(f"/api/comparisons/{slug}/distinctive.csv").text)))
    listed = {row["word"] for row in table}
    for old, new in HOSTILE_WORDS[1:]:
        assert f"'{new}" in words and new not in words and old not in words
        assert f"'{new}" in listed and new not in listed
    assert HOSTILE in words and HOSTILE in listed  # markup is no formula: kept as it is
    rows = list(csv.DictReader(io.StringIO(client.get(f"/api/comparisons/{slug}/table.csv").text)))
    assert [row["name"] for row in rows] == [f"'{HOSTILE_NAMES[0]}", HOSTILE_NAMES[1]]


# ------------------------------------------------------------------------------------------- in a browser


@pytest.mark.slow
@pytest.mark.skipif(
    not Path("/usr/bin/chromium").exists(), reason="needs Debian's Chromium at /usr/bin/chromium"
)
def test_lab_mode_in_a_browser_under_the_content_security_policy(tmp_path):
    """Sign in, upload through the Upload page (its script sends the CSRF header), compare, save a public
    permalink, and open it in a fresh browser that is not signed in; the policy refuses nothing the pages need."""
    from playwright.sync_api import sync_playwright

    from tests.e2e.conftest import CHROMIUM, CHROMIUM_ARGS, free_port, get_json

    data_dir = tmp_path / "data"
    password = secrets.token_urlsafe(12)
    accounts.add_account(make_engine(Settings(data_dir=data_dir).resolved_database_url), "ines", password)
    port = free_port()
    env = os.environ | {"LEXIGROWTH_DATA_DIR": str(data_dir), "LEXIGROWTH_LOAD_DEMO": "false"}
    command = [sys.executable, "-m", "uvicorn", "app.main:create_app", "--factory", "--port", str(port)]
    process = subprocess.Popen([*command, "--log-level", "warning"], cwd=Path(__file__).parents[2], env=env)
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while True:
            try:
                get_json(f"{base}/api/health")
                break
            except OSError:
                assert process.poll() is None and time.monotonic() < deadline, "the app did not start"
                time.sleep(0.2)
        with sync_playwright() as playwright:
            browser = playwright.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
            violations: list[dict] = []
            errors: list[str] = []

            def watch(context):
                context.add_init_script(
                    "document.addEventListener('securitypolicyviolation', e => console.log('CSP ' + "
                    "JSON.stringify({directive: e.violatedDirective, source: e.sourceFile || ''})))"
                )
                page = context.new_page()
                page.on(
                    "console",
                    lambda m: m.text.startswith("CSP ") and violations.append(json.loads(m.text[4:])),
                )
                page.on("pageerror", lambda error: errors.append(str(error)))
                page.set_default_timeout(30_000)
                return page

            page = watch(browser.new_context())
            page.goto(f"{base}/upload")
            page.wait_for_url(re.compile(r".*/login\?next=/upload$"))
            page.fill("input[name=name]", "ines")
            page.fill("input[name=password]", password)
            page.click("#login-form button[type=submit]")
            page.wait_for_url(f"{base}/upload")
            assert page.locator(".member-name").inner_text() == "ines"
            for name, (a, b), marker in (
                ("Alpha", (0, 1200), MARKERS[0]),
                ("Beta", (1200, 3000), MARKERS[1]),
            ):
                page.goto(f"{base}/upload")
                page.fill("input[name=name]", name)
                page.fill("textarea[name=text]", f"{words_of(a, b)} {' '.join([marker] * 20)}")
                page.fill("textarea[name=labels]", f"group={name}")
                page.click("#upload-form button[type=submit]")
                page.wait_for_url(re.compile(r".*/corpora/\d+$"))
                page.wait_for_selector("#growth-plot .main-svg")
            page.goto(f"{base}/")
            page.check("#library-filter input[value='group=Beta']")
            page.click("#library-filter button[type=submit]")
            page.wait_for_url(re.compile(r".*label=group%3DBeta.*"))
            assert page.locator("#library-table tbody tr").count() == 1
            page.goto(f"{base}/")
            page.locator("input[name=corpus]").nth(0).check()
            page.locator("input[name=corpus]").nth(1).check()
            page.click("#compare-button")
            page.wait_for_selector("#growth-plot .main-svg")
            assert MARKERS[0] in page.locator("#distinctive-table").inner_text()
            page.check("#save-public")
            page.click("#save-permalink")
            page.wait_for_url(re.compile(r".*/compare/[A-Za-z0-9_-]{16}$"))
            permalink = page.url
            assert page.locator(".modebar").first.evaluate("e => getComputedStyle(e).position") == "absolute"

            visitor = watch(browser.new_context())
            visitor.goto(permalink)
            visitor.wait_for_selector("#growth-plot .main-svg")
            assert (
                visitor.locator("#words-hidden").is_visible()
                and visitor.locator("#distinctive-table").count() == 0
            )
            assert MARKERS[0] not in visitor.content()
            assert visitor.locator(".member-bar a").inner_text() == "Sign in"
            visitor.goto(f"{base}/")
            visitor.wait_for_url(re.compile(r".*/login\?next=/$"))

            page.goto(permalink)  # the creator makes it members-only again
            page.click("#unpublish")
            page.wait_for_selector("#publish")
            visitor.goto(permalink)
            visitor.wait_for_url(re.compile(r".*/login\?next=/compare/.*"))

            page.goto(f"{base}/docs")  # Swagger UI from the app's own files, under its policy
            page.wait_for_selector(".swagger-ui .info .title")
            assert "Lexigrowth" in page.locator(".swagger-ui .info .title").inner_text()
            page.wait_for_selector(".opblock-tag")
            browser.close()
        assert not errors, errors
        assert violations == []  # plotly.js's own styles come from /static/vendor/plotly.css
    finally:
        process.terminate()
        process.wait(timeout=10)
