"""Command line for lab mode: `user add/list/password/token` and the refusal to serve beyond this computer
without accounts (typer's CliRunner; uvicorn.run is replaced so that nothing listens)."""

from __future__ import annotations

import hashlib
import secrets

import pytest
import uvicorn
from fastapi.testclient import TestClient
from sqlalchemy import text
from typer.testing import CliRunner

from app.cli import app
from app.config import Settings
from app.main import create_app
from app.store import accounts
from app.store.db import make_engine

runner = CliRunner()


@pytest.fixture()
def data(tmp_path) -> list[str]:
    return ["--data-dir", str(tmp_path / "data")]


def engine_of(data: list[str]):
    return make_engine(Settings(data_dir=data[1]).resolved_database_url)


def add(data: list[str], name: str, password: str, *options: str):
    return runner.invoke(
        app, ["user", "add", name, "--password-stdin", *options, *data], input=f"{password}\n"
    )


def test_add_and_list_members(data):
    password = secrets.token_urlsafe(12)
    result = add(data, "ada", password, "--admin")
    assert result.exit_code == 0, result.output
    assert "added admin ada" in result.output and password not in result.output
    assert add(data, "ben", secrets.token_urlsafe(12)).exit_code == 0

    listing = runner.invoke(app, ["user", "list", *data])
    lines = listing.output.strip().splitlines()
    assert lines[0].split() == ["id", "role", "tokens", "name"]
    assert [line.split() for line in lines[1:]] == [["1", "admin", "0", "ada"], ["2", "member", "0", "ben"]]
    member = accounts.authenticate(engine_of(data), "ada", password)
    assert member is not None and member.is_admin


def test_refused_names_and_passwords(data):
    assert add(data, "ada", "long enough").exit_code == 0
    for name, password, message in (
        ("ada", "another one", "already an account"),
        ("bad name", "long enough", "name:"),
        (".hidden", "long enough", "name:"),
        ("cleo", "short", "password:"),
    ):
        result = add(data, name, password)
        assert result.exit_code == 2 and message in result.output, (name, result.output)
    assert [m.name for m, _ in accounts.list_accounts(engine_of(data))] == ["ada"]


def test_password_is_asked_twice_without_echo(data):
    password = secrets.token_urlsafe(12)
    result = runner.invoke(
        app, ["user", "add", "ada", *data], input=f"{password}\nsomething else\n{password}\n{password}\n"
    )
    assert result.exit_code == 0, result.output
    assert result.output.count("Password:") == 2 and "do not match" in result.output
    assert password not in result.output
    assert accounts.authenticate(engine_of(data), "ada", password) is not None


def test_new_password_ends_the_old_one(data):
    old, new = secrets.token_urlsafe(12), secrets.token_urlsafe(12)
    add(data, "ada", old)
    result = runner.invoke(app, ["user", "password", "ada", "--password-stdin", *data], input=f"{new}\n")
    assert result.exit_code == 0 and new not in result.output
    engine = engine_of(data)
    assert accounts.authenticate(engine, "ada", old) is None
    assert accounts.authenticate(engine, "ada", new) is not None
    missing = runner.invoke(app, ["user", "password", "nobody", "--password-stdin", *data], input="x" * 9)
    assert missing.exit_code == 2 and "no account" in missing.output


def test_token_is_printed_once_stored_as_a_hash_and_can_be_revoked(data):
    add(data, "ada", secrets.token_urlsafe(12))
    result = runner.invoke(app, ["user", "token", "ada", *data])
    assert result.exit_code == 0
    token = result.stdout.strip().splitlines()[-1]
    assert token.startswith("lxg_") and len(token) > 40
    assert runner.invoke(app, ["user", "list", *data]).output.strip().splitlines()[1].split()[2] == "1"
    store_file = data[1] + "/lexigrowth.sqlite3"
    with open(store_file, "rb") as stored:
        content = stored.read()
    assert token.encode() not in content
    # reference: hashlib's SHA-256 (FIPS 180-4) of the token is what the store keeps
    assert hashlib.sha256(token.encode()).hexdigest() in token_hashes(data)

    client = TestClient(create_app(Settings(data_dir=data[1], load_demo=False)))
    headers = {"Authorization": f"Bearer {token}"}
    assert client.get("/api/corpora", headers=headers).status_code == 200
    revoked = runner.invoke(app, ["user", "token", "ada", "--revoke", *data])
    assert revoked.exit_code == 0 and "revoked 1 API token" in revoked.output
    assert client.get("/api/corpora", headers=headers).status_code == 401
    assert runner.invoke(app, ["user", "token", "nobody", *data]).exit_code == 2


def token_hashes(data: list[str]) -> set[str]:
    with engine_of(data).connect() as connection:
        return set(connection.execute(text("SELECT token_hash FROM apitoken")).scalars())


@pytest.fixture()
def started(monkeypatch) -> list[dict]:
    """The keyword arguments of every uvicorn.run call (nothing really listens)."""
    calls: list[dict] = []
    monkeypatch.setattr(uvicorn, "run", lambda app, **kwargs: calls.append(kwargs | {"app": app}))
    return calls


@pytest.mark.parametrize("host", ["0.0.0.0", "::", "192.0.2.10", "lab.example.org", ""])
def test_serve_refuses_other_addresses_while_there_is_no_account(data, started, host):
    result = runner.invoke(app, ["serve", "--host", host, *data])
    assert result.exit_code == 2 and "refusing to listen" in result.output and "user add" in result.output
    assert started == []


@pytest.mark.parametrize("host", ["127.0.0.1", "127.0.0.2", "::1", "localhost"])
def test_serve_on_this_computer_needs_no_account(data, started, host):
    result = runner.invoke(app, ["serve", "--host", host, *data])
    assert result.exit_code == 0 and "personal mode" in result.output
    assert [{k: v for k, v in call.items() if k != "app"} for call in started] == [
        {
            "host": host,
            "port": 8000,
            "log_level": "info",
            "proxy_headers": False,  # no proxy trusted: X-Forwarded-* are ignored
            "forwarded_allow_ips": None,
            "timeout_graceful_shutdown": 2,
        }
    ]


def test_serve_on_every_address_needs_an_account_and_the_host_names(data, started, monkeypatch):
    add(data, "ada", secrets.token_urlsafe(12), "--admin")
    monkeypatch.delenv("LEXIGROWTH_ALLOWED_HOSTS", raising=False)
    refused = runner.invoke(app, ["serve", "--host", "0.0.0.0", "--port", "8123", *data])
    assert refused.exit_code == 2 and "LEXIGROWTH_ALLOWED_HOSTS" in refused.output and started == []
    monkeypatch.setenv("LEXIGROWTH_ALLOWED_HOSTS", "Lab.Example.org, 192.0.2.10")
    result = runner.invoke(app, ["serve", "--host", "0.0.0.0", "--port", "8123", *data])
    assert result.exit_code == 0 and "lab mode" in result.output
    assert "lab.example.org, 192.0.2.10" in result.output
    assert started[0]["host"] == "0.0.0.0" and started[0]["port"] == 8123
    served = TestClient(started[0]["app"], base_url="http://lab.example.org")
    assert served.get("/login").status_code == 200
    refused = served.get("/login", headers={"Host": "lab.example.org.evil.example"})
    assert refused.status_code == 400 and "LEXIGROWTH_ALLOWED_HOSTS" in refused.text


def test_serve_on_one_address_answers_for_that_address_and_trusts_only_listed_proxies(
    data, started, monkeypatch
):
    add(data, "ada", secrets.token_urlsafe(12), "--admin")
    monkeypatch.delenv("LEXIGROWTH_ALLOWED_HOSTS", raising=False)
    monkeypatch.setenv("LEXIGROWTH_TRUSTED_PROXIES", "127.0.0.1, 10.0.0.0/8")
    result = runner.invoke(app, ["serve", "--host", "192.0.2.10", *data])
    assert result.exit_code == 0, result.output
    assert started[0]["proxy_headers"] is True and started[0]["forwarded_allow_ips"] == "127.0.0.1,10.0.0.0/8"
    served = TestClient(started[0]["app"], base_url="http://192.0.2.10:8000")
    assert served.get("/login").status_code == 200
    assert served.get("/login", headers={"Host": "rebound.example:8000"}).status_code == 400


def test_password_change_revokes_or_keeps_tokens_and_says_which(data):
    assert add(data, "ben", "first password").exit_code == 0
    engine = engine_of(data)
    tokens = [accounts.new_token(engine, "ben") for _ in range(2)]

    kept = runner.invoke(
        app, ["user", "password", "ben", "--password-stdin", "--keep-tokens", *data], input="second one\n"
    )
    assert kept.exit_code == 0, kept.output
    assert "kept 2 API token(s) of ben: they still work" in kept.output
    assert all(accounts.member_by_token(engine, t) is not None for t in tokens)

    asked = runner.invoke(app, ["user", "password", "ben", *data], input="third one!\nthird one!\ny\n")
    assert asked.exit_code == 0, asked.output
    assert "has 2 API token(s), which keep working" in asked.output
    assert "revoked 2 API token(s) of ben" in asked.output
    assert all(accounts.member_by_token(engine, t) is None for t in tokens)

    token = accounts.new_token(engine, "ben")
    revoked = runner.invoke(
        app, ["user", "password", "ben", "--password-stdin", "--revoke-tokens", *data], input="fourth one\n"
    )
    assert "revoked 1 API token(s)" in revoked.output and accounts.member_by_token(engine, token) is None


def test_unlock_forgets_failed_sign_ins(data):
    from app.store import signins

    assert add(data, "ben", "first password").exit_code == 0
    engine = engine_of(data)
    by_pair = signins.Allowance(pair=1, address=5)  # only the name-and-address pair is over its allowance
    by_address = signins.Allowance(pair=5, address=1)  # only the address is
    for address in ("192.0.2.1", "192.0.2.2"):
        assert signins.attempt(engine, "ben", address, by_pair) == 0  # each attempt counts, also this one
    assert signins.attempt(engine, "cleo", "192.0.2.3", by_pair) == 0
    assert signins.attempt(engine, "ben", "192.0.2.1", by_pair) > 0

    result = runner.invoke(app, ["user", "unlock", "ben", *data])
    assert result.exit_code == 0 and "forgot the failed sign-ins of 2" in result.output
    assert signins.attempt(engine, "BEN", "192.0.2.1", by_pair) == 0  # names are compared folded
    assert signins.attempt(engine, "ben", "192.0.2.2", by_pair) == 0
    # the address's own count (3 attempts) stays until cleared by address (or everything)
    assert signins.attempt(engine, "dora", "192.0.2.1", by_address) > 0
    assert runner.invoke(app, ["user", "unlock", "--address", "192.0.2.1", *data]).exit_code == 0
    assert signins.attempt(engine, "dora", "192.0.2.1", by_address) == 0
    assert signins.attempt(engine, "cleo", "192.0.2.3", by_pair) > 0
    everything = runner.invoke(app, ["user", "unlock", *data])
    assert everything.exit_code == 0 and signins.attempt(engine, "cleo", "192.0.2.3", by_pair) == 0


def test_failures_older_than_a_day_are_removed_from_the_store(data):
    from datetime import UTC, datetime, timedelta

    from app.store import signins

    engine = engine_of(data)
    long_ago = datetime.now(UTC) - timedelta(days=2)
    for address in ("192.0.2.10", "192.0.2.11"):
        signins.attempt(engine, "ben", address, signins.Allowance(), long_ago)
    signins.attempt(engine, "cleo", "192.0.2.12", signins.Allowance())
    with engine.connect() as connection:
        keys = set(connection.execute(text("SELECT key FROM signinfailures")).scalars())
    assert keys == {"pair cleo 192.0.2.12", "address 192.0.2.12"}
