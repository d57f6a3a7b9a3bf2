"""Limits that hold: request bodies by declared and by received size (on the real server, watching its scratch
space), pasted text up to the upload limit, UTF-16 without a byte-order mark, HEAD, names, labels, profile
names and words with caps and without control characters, and no NaN or Infinity in any JSON.

References: RFC 9110 sections 9.3.2 (HEAD) and 15.5.14 (413 Content Too Large), RFC 9112 section 7.1
(chunked transfer coding), RFC 8259 section 6 (JSON has no NaN or Infinity), Unicode Technical Report #36
(bidirectional controls in names).
"""

from __future__ import annotations

import json
import math
import os
import re
import select
import socket
import time
from pathlib import Path
from urllib.parse import urlsplit

import numpy as np
import pytest

from app.ingest.profiles import MAX_WORD_CHARS
from app.web.jsonsafe import FiniteJSONResponse, finite
from app.web.limits import MULTIPART_ALLOWANCE, OTHER_BODY_BYTES
from tests.safety.server import running_server

MB = 1 << 20
BOUNDARY = "lexigrowth-test-boundary"
FIGURE_JSON = re.compile(r'<script type="application/json" id="[^"]+-data">(.*?)</script>', re.S)


def upload(client, name: str, *, text: str | None = None, content: bytes | None = None, **form):
    files = {"files": ("draft.txt", content, "text/plain")} if content is not None else None
    data = {"name": name, **form} | ({"text": text} if text is not None else {})
    return client.post("/api/corpora?wait=1", data=data, files=files)


# ------------------------------------------------------------------------- bodies, on the real server


def _connect(base_url: str) -> socket.socket:
    parts = urlsplit(base_url)
    return socket.create_connection((parts.hostname, parts.port), timeout=30)


def _response(sock: socket.socket) -> tuple[int, dict]:
    """Status and JSON body of the (short, Content-Length framed) answer."""
    raw = b""
    while b"\r\n\r\n" not in raw:
        chunk = sock.recv(65536)
        if not chunk:
            break
        raw += chunk
    head, _, body = raw.partition(b"\r\n\r\n")
    length = int(re.search(rb"content-length: (\d+)", head, re.I).group(1))
    while len(body) < length:
        body += sock.recv(65536)
    return int(head.split()[1]), json.loads(body[:length])


def _scratch_bytes(pid: int, folders: list[Path]) -> int:
    """Bytes of the regular files in ``folders`` (deleted ones too) that process ``pid`` holds open, plus
    the files lying in them: what an upload occupies on disk right now."""
    held = 0
    for fd in Path(f"/proc/{pid}/fd").iterdir():
        try:
            target = os.readlink(fd)
            if any(target.startswith(str(f)) for f in folders):
                held += fd.stat().st_size
        except OSError:
            continue
    lying = sum(p.stat().st_size for f in folders for p in f.rglob("*") if p.is_file())
    return held + lying


@pytest.fixture(scope="module")
def small_limit_server(tmp_path_factory):
    """The real server with a 2 MB upload limit, its temporary files (the multipart spool) in a folder of
    their own."""
    root = tmp_path_factory.mktemp("limits")
    spool = root / "spool"
    spool.mkdir()
    with running_server(
        root / "data", extra_env={"LEXIGROWTH_MAX_UPLOAD_MB": "2", "TMPDIR": str(spool)}
    ) as server:
        yield server, [spool, server.data_dir / "work"]


def test_declared_oversize_upload_is_refused_before_its_body_is_read(small_limit_server):
    server, _ = small_limit_server
    with _connect(server.base_url) as sock:
        sock.sendall(
            b"POST /api/corpora?wait=1 HTTP/1.1\r\nHost: 127.0.0.1\r\n"
            + f"Content-Type: multipart/form-data; boundary={BOUNDARY}\r\n".encode()
            + f"Content-Length: {1 << 30}\r\n\r\n".encode()  # 1 GB declared, not a byte of it sent
        )
        started = time.monotonic()
        status, body = _response(sock)
    assert status == 413 and "limit of 2 MB" in body["detail"], body
    assert time.monotonic() - started < 5


def test_streamed_oversize_upload_is_cut_off_and_scratch_stays_small(small_limit_server):
    """A chunked body (no Content-Length) of up to 40 MB against a 2 MB limit: the server answers 413
    as soon as it has received more than the limit, and the disk it used never passes the limit."""
    server, folders = small_limit_server
    head = (
        f'--{BOUNDARY}\r\nContent-Disposition: form-data; name="name"\r\n\r\nbig\r\n'
        f'--{BOUNDARY}\r\nContent-Disposition: form-data; name="files"; filename="big.txt"\r\n'
        "Content-Type: text/plain\r\n\r\n"
    ).encode()
    block = (b"word " * 52429)[: MB // 4]
    sent, largest, answered = 0, 0, False
    with _connect(server.base_url) as sock:
        sock.sendall(
            b"POST /api/corpora?wait=1 HTTP/1.1\r\nHost: 127.0.0.1\r\nTransfer-Encoding: chunked\r\n"
            + f"Content-Type: multipart/form-data; boundary={BOUNDARY}\r\n\r\n".encode()
        )
        for piece in [head] + [block] * 160:
            if select.select([sock], [], [], 0)[0]:
                answered = True  # the answer came while we were still sending
                break
            try:
                sock.sendall(f"{len(piece):x}\r\n".encode() + piece + b"\r\n")
            except (BrokenPipeError, ConnectionResetError):
                break
            sent += len(piece)
            largest = max(largest, _scratch_bytes(server.process.pid, folders))
        if not answered:
            select.select([sock], [], [], 10)
        status, body = _response(sock)
    assert status == 413 and "limit of 2 MB" in body["detail"], body
    assert sent < 20 * MB, f"the server read {sent / MB:.1f} MB before refusing"
    assert largest <= 2 * MB + MULTIPART_ALLOWANCE, f"{largest / MB:.2f} MB of scratch"
    assert _scratch_bytes(server.process.pid, folders) == 0  # and nothing is left behind
    print(f"sent {sent / MB:.2f} MB before the 413; largest scratch seen {largest / MB:.2f} MB")


def test_an_upload_within_the_limit_still_works_on_the_real_server(small_limit_server):
    server, _ = small_limit_server
    import httpx

    body = ("plain words repeated " * 60_000).encode()  # 1.2 MB
    answer = httpx.post(
        f"{server.base_url}/api/corpora?wait=1",
        data={"name": "fits"},
        files={"files": ("fits.txt", body, "text/plain")},
        timeout=120,
    )
    assert answer.status_code == 201, answer.text


def test_other_requests_have_a_small_body_limit(client):
    answer = client.post("/api/estimate", content=b"{" + b" " * OTHER_BODY_BYTES + b"}")
    assert answer.status_code == 413 and "larger than" in answer.json()["detail"]


# ------------------------------------------------------------------------------------- pasted text


def test_pasted_text_over_one_megabyte_is_accepted(client):
    text = "a river runs past the old mill and the miller sings " * 45_000  # 2.3 MB, limit 5 MB
    assert len(text.encode()) > 2 * MB
    answer = upload(client, "pasted", text=text)
    assert answer.status_code == 201, answer.text
    assert answer.json()["tokens"] == 11 * 45_000


def test_pasted_text_over_the_upload_limit_is_refused(client):
    answer = upload(client, "too much", text="word " * (5 * MB // 5 + 10))
    assert answer.status_code == 413 and "limit of 5 MB" in answer.json()["detail"]
    assert client.get("/api/corpora").json() == []


# ---------------------------------------------------------------------------------------- encodings


@pytest.mark.parametrize("codec", ["utf-16-le", "utf-16-be"])
def test_utf16_without_byte_order_mark_is_read(client, codec):
    text = "Grüße aus Köln, l’été à Zürich; Русский текст. " * 50
    answer = upload(client, codec, content=text.encode(codec))
    assert answer.status_code == 201, answer.text
    assert (answer.json()["tokens"], answer.json()["types"]) == (8 * 50, 8)  # decoded right: 8 words


# --------------------------------------------------------------------------------------------- HEAD


def test_head_is_answered_where_get_is(client):
    for path in ("/api/health", "/", "/api/corpora", "/upload"):
        got, head = client.get(path), client.head(path)
        assert head.status_code == got.status_code == 200, path
        assert head.content == b""
        assert head.headers["content-type"] == got.headers["content-type"]
        assert head.headers.get("content-security-policy")  # the security headers too


# -------------------------------------------------------------------------- names, labels and words


@pytest.mark.parametrize(
    ("field", "value", "message"),
    [
        ("name", "nul\x00inside", "U+0000"),
        ("name", "escape \x1b[31m red", "U+001B"),
        ("name", "right-to-left \u202egnp.exe", "U+202E"),
        ("name", "x" * 201, "at most 200 characters"),
        ("labels", "author=ann\x07", "U+0007"),
        ("labels", "k=" + "v" * 501, "at most 500 characters"),
        ("profile", json.dumps({"name": "p" * 65}), "at most 64 characters"),
        ("profile", json.dumps({"name": "nul\x00"}), "U+0000"),
        ("profile", json.dumps({"name": "p" * 900_000}), "at most 64 characters"),
    ],
)
def test_names_labels_and_profile_names_are_capped_and_free_of_control_characters(
    client, field, value, message
):
    form = {"name": "ok"} | {field: value}
    answer = client.post(
        "/api/corpora?wait=1", data=form, files={"files": ("a.txt", b"some words", "text/plain")}
    )
    assert answer.status_code == 422 and message in answer.json()["detail"], answer.text
    assert len(answer.text) < 2000  # the refusal does not echo a huge value
    assert client.get("/api/corpora").json() == []


def test_whitespace_in_names_becomes_single_spaces(client):
    answer = upload(client, "  two\tparts\r\nof a name ", content=b"some words", labels="a key=\tvalue\n")
    assert answer.status_code == 201, answer.text
    assert answer.json()["name"] == "two parts of a name"
    assert answer.json()["labels"] == {"a key": "value"}


def test_overlong_words_are_not_counted(client):
    blob = "q" * (MAX_WORD_CHARS + 1)
    text = f"short words {blob} and {'z' * MAX_WORD_CHARS} end"
    answer = upload(client, "long", content=text.encode())
    assert answer.status_code == 201, answer.text
    corpus_id = answer.json()["id"]
    words = {w["word"] for w in client.get(f"/api/corpora/{corpus_id}/words?limit=100").json()["words"]}
    assert words == {"short", "words", "and", "z" * MAX_WORD_CHARS, "end"}


# ------------------------------------------------------------------------------- NaN and Infinity


def test_non_finite_numbers_become_null_at_the_serialisation_boundary():
    value = {"a": [1.0, math.inf, (-math.inf, math.nan)], "b": {"c": float("nan")}, "d": "Infinity"}
    assert finite(value) == {"a": [1.0, None, [None, None]], "b": {"c": None}, "d": "Infinity"}
    assert json.loads(FiniteJSONResponse(value).body) == finite(value)


def _strict(text: str):
    """json.loads that refuses NaN and Infinity, as a browser's JSON.parse does."""

    def refuse(constant):
        raise ValueError(f"{constant} is not JSON")

    return json.loads(text, parse_constant=refuse)


def test_far_horizon_gives_finite_figure_json(client, stdlib_text):
    """Far beyond a small corpus (up to 10^6 times its size) the recommended model's range keeps both ends
    finite and around its prediction (a band in log units, ``ErrorBand``), and the growth figure and the
    JSON answers stay valid JSON (no NaN or Infinity, which a browser's JSON.parse refuses)."""
    from app.services import modelling

    words = re.findall(r"[a-z]+", stdlib_text.lower())
    corpus_id = upload(client, "small", content=" ".join(words[-3400:]).encode()).json()["id"]
    tokens = client.get(f"/api/corpora/{corpus_id}").json()["tokens"]
    recommended = modelling.load_models(client.app.state.engine, corpus_id).predictors["recommended"]
    sizes = np.geomspace(tokens, 1e6 * tokens, 50)
    low, value, high = recommended.types_low(sizes), recommended.types(sizes), recommended.types_high(sizes)
    assert np.all(np.isfinite(low) & np.isfinite(high)) and np.all((low <= value) & (value <= high))
    assert np.all(low > 0)
    for horizon in (600, 1000):
        page = client.get(f"/corpora/{corpus_id}?horizon={horizon}")
        assert page.status_code == 200
        assert "Infinity" not in page.text and "NaN" not in page.text
        for figure in FIGURE_JSON.findall(page.text):
            _strict(figure)
    for path in (
        f"/api/corpora/{corpus_id}/models",
        f"/api/corpora/{corpus_id}/predict?tokens={600 * tokens}",
    ):
        _strict(client.get(path).text)


# ------------------------------------------------------------------------------------------ file modes


def test_store_and_scratch_are_private_to_their_owner(tmp_path):
    """The data folder, the SQLite file with its WAL files and the scratch folder: modes 0700 and 0600
    whatever the umask (common practice for files holding password hashes and uploaded text)."""
    from fastapi.testclient import TestClient

    from app.config import Settings
    from app.main import create_app

    data_dir = tmp_path / "data"
    previous = os.umask(0o022)
    try:
        with TestClient(create_app(Settings(data_dir=data_dir, load_demo=False))) as client:
            assert upload(client, "modes", content=b"a few words").status_code == 201
            modes = {p.name: p.stat().st_mode & 0o777 for p in [data_dir, *data_dir.iterdir()]}
    finally:
        os.umask(previous)
    assert modes["data"] == 0o700 and modes["work"] == 0o700
    assert modes["lexigrowth.sqlite3"] == 0o600 and modes["secret_key"] == 0o600
    assert {modes[name] for name in modes if name.startswith("lexigrowth.sqlite3-")} <= {0o600}

    (data_dir / "lexigrowth.sqlite3").chmod(0o644)  # made readable by hand, or by an older version
    data_dir.chmod(0o755)
    create_app(Settings(data_dir=data_dir, load_demo=False))
    assert (data_dir / "lexigrowth.sqlite3").stat().st_mode & 0o777 == 0o600
    assert data_dir.stat().st_mode & 0o777 == 0o700
