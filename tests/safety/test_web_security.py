"""Attacks on a real server (``lexigrowth serve``): writes from another site, in personal and in lab mode, on
every state-changing route of the router; requests for another host name (DNS rebinding); 30 password
guesses at once; a client address forged in X-Forwarded-For."""

from __future__ import annotations

import hashlib
import re
import sqlite3
import time
from collections import Counter
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from contextlib import closing
from pathlib import Path
from threading import Barrier

import httpx
import pytest

from app.store import accounts
from app.store.db import make_engine
from tests.safety.apps import STORE_FILE, throwaway_app
from tests.safety.server import Server, running_server

STATE_CHANGING = frozenset({"POST", "PUT", "PATCH", "DELETE"})
EVIL = "http://evil.example"
PASSWORD = "a long enough password"
GUESSES = 30
# The store's tables that record what users did (the task table also holds heartbeats of the worker).
VOLATILE_TABLES = {"backgroundtask", "alembic_version"}


def routes_of(routes) -> Iterator:
    """The routes of a router, those of the routers it includes too."""
    for route in routes:
        if hasattr(route, "original_router"):
            yield from routes_of(route.original_router.routes)
        else:
            yield route


def state_changing_routes() -> list[tuple[str, str]]:
    """Every (method, path) of the app that may change something, read from its router: a new route is
    covered without editing this test."""
    with throwaway_app() as application:
        found = {
            (method, route.path)
            for route in routes_of(application.routes)
            for method in (getattr(route, "methods", None) or set()) & STATE_CHANGING
        }
    assert len(found) >= 15, found  # the corpus, comparison, estimate, sign-in and account routes
    return sorted(found)


def filled(path: str, corpus_id: int, slug: str) -> str:
    return path.replace("{corpus_id}", str(corpus_id)).replace("{slug}", slug)


def store_fingerprint(data_dir: Path) -> str:
    """SHA-256 of every row of every table users change (all but the task table's moving parts)."""
    digest = hashlib.sha256()
    with closing(read_only(data_dir)) as connection:
        tables = [
            name
            for (name,) in connection.execute(
                "SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name"
            )
            if name not in VOLATILE_TABLES
        ]
        for table in tables:
            digest.update(table.encode())
            for row in sorted(map(repr, connection.execute(f'SELECT * FROM "{table}"'))):
                digest.update(row.encode())
        digest.update(repr(connection.execute("SELECT count(*) FROM backgroundtask").fetchone()).encode())
    return digest.hexdigest()


def settled(server: Server, headers: dict | None = None) -> list[int]:
    """The ids of the stored corpora, once none has its model report under way (so that the store only
    changes through requests)."""
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        corpora = httpx.get(f"{server.base_url}/api/corpora", headers=headers, timeout=30).json()
        statuses = [
            httpx.get(f"{server.base_url}/api/corpora/{c['id']}", headers=headers, timeout=30).json()[
                "models"
            ]["status"]
            for c in corpora
        ]
        jobs = httpx.get(f"{server.base_url}/api/jobs", headers=headers, timeout=30).json()
        if corpora and all(s in ("ready", "failed") for s in statuses) and not jobs:
            return [c["id"] for c in corpora]
        time.sleep(0.3)
    raise AssertionError(f"the server did not settle:\n{server.log()}")


def upload_two(server: Server, headers: dict | None = None) -> None:
    for name, words in (("Alpha", "the cat sat on the mat " * 300), ("Beta", "a dog ran in the park " * 400)):
        answer = httpx.post(
            f"{server.base_url}/api/corpora?wait=1",
            data={"name": name},
            files={"files": (f"{name}.txt", words.encode(), "text/plain")},
            headers=headers,
            timeout=120,
        )
        assert answer.status_code in (201, 202), answer.text


def sign_in_form(base_url: str, **headers: str) -> tuple[str, str]:
    """The cookie and CSRF token a browser gets with the sign-in page."""
    page = httpx.get(f"{base_url}/login", headers=headers, timeout=30)
    cookie = page.headers["set-cookie"].split(";")[0]
    return cookie, re.search(r'name="csrf_token" value="([^"]+)"', page.text).group(1)


def sign_in(server: Server, name: str) -> tuple[str, str]:
    """A member's session cookie and the CSRF token of their pages."""
    cookie, token = sign_in_form(server.base_url)
    answer = httpx.post(
        f"{server.base_url}/login",
        data={"name": name, "password": PASSWORD, "csrf_token": token},
        headers={"Cookie": cookie, "Origin": server.base_url},
    )
    assert answer.status_code == 303, answer.text
    cookie = answer.headers["set-cookie"].split(";")[0]
    page = httpx.get(f"{server.base_url}/upload", headers={"Cookie": cookie})
    return cookie, re.search(r'<meta name="csrf-token" content="([^"]+)">', page.text).group(1)


def with_accounts(data_dir: Path, *names: str) -> Path:
    engine = make_engine(f"sqlite:///{data_dir / STORE_FILE}")
    for name in names:
        accounts.add_account(engine, name, PASSWORD, is_admin=name == "ada")
    engine.dispose()
    return data_dir


def read_only(data_dir: Path) -> sqlite3.Connection:
    """A read-only connection to a running server's store (the tests only look)."""
    return sqlite3.connect(f"file:{data_dir / STORE_FILE}?mode=ro", uri=True)


def counted(data_dir: Path) -> dict[str, int]:
    with closing(read_only(data_dir)) as connection:
        return dict(connection.execute("SELECT key, failures FROM signinfailures"))


def attack_every_route(server: Server, corpus_id: int, slug: str, cookie: str, token: str) -> None:
    """Each state-changing route, sent as a page of another site would (with the victim's cookie, and even
    with a right CSRF token, which such a page cannot know): refused with 403 and the store unchanged."""
    before = store_fingerprint(server.data_dir)
    refused = []
    for method, path in state_changing_routes():
        url = f"{server.base_url}{filled(path, corpus_id, slug)}"
        form = {
            "confirm": "yes",
            "csrf_token": token,
            "name": "taken",
            "public": "true",
            "password": PASSWORD,
        }
        for says in ({"Origin": EVIL}, {"Sec-Fetch-Site": "cross-site"}, {"Origin": "null"}):
            answer = httpx.request(method, url, data=form, headers={"Cookie": cookie} | says, timeout=30)
            refused.append((method, path, answer.status_code, "another site" in answer.text))
    assert {(status, says) for *_, status, says in refused} == {(403, True)}, refused
    assert store_fingerprint(server.data_dir) == before


def test_cross_site_writes_change_nothing_in_personal_mode(tmp_path):
    with running_server(tmp_path / "data") as server:
        upload_two(server)  # a script (no Origin, no cookie) may write, as the command line can
        corpus_id = settled(server)[0]
        slug = httpx.post(f"{server.base_url}/api/comparisons", json={"corpora": settled(server)}).json()[
            "slug"
        ]
        page = httpx.get(f"{server.base_url}/corpora/{corpus_id}")
        cookie = page.headers["set-cookie"].split(";")[0]
        token = re.search(r'<meta name="csrf-token" content="([^"]+)">', page.text).group(1)
        attack_every_route(server, corpus_id, slug, cookie, token)
        # the same request from the page itself deletes the corpus: the routes above were able to act
        deleted = httpx.post(
            f"{server.base_url}/corpora/{corpus_id}/delete",
            data={"confirm": "yes", "csrf_token": token},
            headers={"Cookie": cookie, "Origin": server.base_url, "Sec-Fetch-Site": "same-origin"},
        )
        assert deleted.status_code == 303
        assert httpx.get(f"{server.base_url}/api/corpora/{corpus_id}").status_code == 404


def test_cross_site_writes_change_nothing_in_lab_mode(tmp_path):
    data_dir = with_accounts(tmp_path / "data", "ada")
    with running_server(data_dir) as server:
        cookie, token = sign_in(server, "ada")
        browser = {"Cookie": cookie, "X-CSRF-Token": token, "Origin": server.base_url}
        upload_two(server, browser)
        ids = settled(server, browser)
        saved = httpx.post(f"{server.base_url}/api/comparisons", json={"corpora": ids}, headers=browser)
        assert saved.status_code == 201, saved.text
        attack_every_route(server, ids[0], saved.json()["slug"], cookie, token)
        deleted = httpx.delete(f"{server.base_url}/api/corpora/{ids[0]}", headers=browser)
        assert deleted.status_code == 204


@pytest.fixture(scope="module")
def lab_server(tmp_path_factory) -> Iterator[Server]:
    """A lab-mode server (members ada and cleo) that trusts no proxy."""
    data_dir = with_accounts(tmp_path_factory.mktemp("lab") / "data", "ada", "cleo")
    with running_server(data_dir) as server:
        yield server


def test_requests_for_another_host_name_are_refused(lab_server):
    for host in ("evil.example", "evil.example:80", f"localhost.evil.example:{lab_server.base_url[-5:]}"):
        answer = httpx.get(f"{lab_server.base_url}/api/health", headers={"Host": host})
        assert answer.status_code == 400 and "does not answer for the host name" in answer.text, host
    port = lab_server.base_url.rsplit(":", 1)[1]
    for host in (f"localhost:{port}", f"127.0.0.1:{port}", f"[::1]:{port}", "LOCALHOST"):
        assert httpx.get(f"{lab_server.base_url}/api/health", headers={"Host": host}).status_code == 200


def test_parallel_password_guesses_are_counted_and_locked_out(lab_server):
    # Each guess is counted before its password is checked: of 30 at once from one address, exactly the
    # pair's 5 free attempts reach the password check (401) and the other 25 wait (429).
    cookie, token = sign_in_form(lab_server.base_url)
    start = Barrier(GUESSES)

    def guess(number: int) -> int:
        start.wait()
        return httpx.post(
            f"{lab_server.base_url}/login",
            data={"name": "cleo", "password": f"guess {number}", "csrf_token": token},
            headers={"Cookie": cookie, "Origin": lab_server.base_url},
            timeout=120,
        ).status_code

    with ThreadPoolExecutor(GUESSES) as pool:
        statuses = Counter(pool.map(guess, range(GUESSES)))
    assert statuses == {401: 5, 429: 25}
    assert counted(lab_server.data_dir)["pair cleo 127.0.0.1"] == GUESSES
    right = httpx.post(
        f"{lab_server.base_url}/login",
        data={"name": "cleo", "password": PASSWORD, "csrf_token": token},
        headers={"Cookie": cookie, "Origin": lab_server.base_url},
    )
    assert right.status_code == 429  # locked out: even the right password waits


def test_a_forged_forwarded_for_does_not_change_the_counted_address(lab_server):
    cookie, token = sign_in_form(lab_server.base_url, **{"X-Forwarded-Proto": "https"})
    assert "Secure" not in httpx.get(f"{lab_server.base_url}/login").headers["set-cookie"]
    before = counted(lab_server.data_dir)
    answer = httpx.post(
        f"{lab_server.base_url}/login",
        data={"name": "ada", "password": "wrong", "csrf_token": token},
        headers={"Cookie": cookie, "Origin": lab_server.base_url, "X-Forwarded-For": "203.0.113.66"},
    )
    assert answer.status_code in (401, 429)
    after = counted(lab_server.data_dir)
    assert after["pair ada 127.0.0.1"] == before.get("pair ada 127.0.0.1", 0) + 1
    assert not [key for key in after if "203.0.113.66" in key]


def test_behind_a_trusted_proxy_the_address_it_saw_is_counted(tmp_path):
    # The proxy (here: this test, from 127.0.0.1) appends the address it saw to what the client sent;
    # uvicorn believes only that last entry, never the first one the client wrote itself.
    data_dir = with_accounts(tmp_path / "data", "ada")
    with running_server(data_dir, extra_env={"LEXIGROWTH_TRUSTED_PROXIES": "127.0.0.1"}) as server:
        proxied = {"X-Forwarded-Proto": "https", "X-Forwarded-For": "203.0.113.66, 198.51.100.20"}
        page = httpx.get(f"{server.base_url}/login", headers=proxied)
        assert "; Secure" in page.headers["set-cookie"]  # HTTPS as the proxy says
        cookie = page.headers["set-cookie"].split(";")[0]
        token = re.search(r'name="csrf_token" value="([^"]+)"', page.text).group(1)
        https_origin = server.base_url.replace("http://", "https://")
        answer = httpx.post(
            f"{server.base_url}/login",
            data={"name": "ada", "password": "wrong", "csrf_token": token},
            headers={"Cookie": cookie, "Origin": https_origin} | proxied,
        )
        assert answer.status_code == 401, answer.text
        keys = set(counted(server.data_dir))
        assert keys == {"pair ada 198.51.100.20", "address 198.51.100.20"}
