"""Shared fixtures: an app on a fresh temporary store, and real English text from the standard library."""

from __future__ import annotations

import importlib
import inspect
import os

import pytest
from fastapi.testclient import TestClient

# Apps made by tests run their background tasks in the requesting thread (no worker process per app);
# servers started as processes by the tests do not inherit LEXIGROWTH_* settings and use their worker.
os.environ.setdefault("LEXIGROWTH_TASK_WORKER", "0")
# Starlette's test client asks for the host "testserver": the apps made by tests answer for it too (a real
# server answers only for loopback names and the configured ones).
TEST_CLIENT_HOST = "testserver"
os.environ.setdefault("LEXIGROWTH_ALLOWED_HOSTS", TEST_CLIENT_HOST)

from app.config import Settings  # noqa: E402
from app.main import create_app  # noqa: E402

# Real English that no one on this project wrote: docstrings of these standard-library modules.
STDLIB_MODULES = [
    "abc",
    "argparse",
    "ast",
    "asyncio",
    "base64",
    "bisect",
    "calendar",
    "collections",
    "contextlib",
    "copy",
    "csv",
    "dataclasses",
    "datetime",
    "decimal",
    "difflib",
    "email",
    "enum",
    "fractions",
    "ftplib",
    "functools",
    "getopt",
    "gettext",
    "glob",
    "heapq",
    "hmac",
    "http.client",
    "imaplib",
    "inspect",
    "ipaddress",
    "json",
    "logging",
    "mailbox",
    "optparse",
    "pathlib",
    "pickle",
    "pprint",
    "random",
    "shutil",
    "smtplib",
    "socket",
    "statistics",
    "string",
    "subprocess",
    "tarfile",
    "textwrap",
    "threading",
    "typing",
    "unittest",
    "zipfile",
]


def stdlib_docstrings() -> str:
    """Module, class and function docstrings of the modules above, in a fixed order."""
    parts: list[str] = []
    for name in STDLIB_MODULES:
        module = importlib.import_module(name)
        parts.append(inspect.getdoc(module) or "")
        for _, member in sorted(inspect.getmembers(module), key=lambda kv: kv[0]):
            if (inspect.isclass(member) or inspect.isfunction(member)) and getattr(
                member, "__module__", ""
            ) == name:
                parts.append(inspect.getdoc(member) or "")
    return "\n\n".join(p for p in parts if p)


@pytest.fixture(scope="session")
def stdlib_text() -> str:
    return stdlib_docstrings()


@pytest.fixture()
def settings(tmp_path) -> Settings:
    return Settings(data_dir=tmp_path / "data", load_demo=False, max_upload_mb=5)


# What every browser in use sends with a POST, PUT, PATCH or DELETE of a page of this site: the tests'
# client keeps the cookie its pages set, so without it a write would need the page's CSRF token.
SAME_ORIGIN = {"Origin": f"http://{TEST_CLIENT_HOST}"}


@pytest.fixture()
def client(settings) -> TestClient:
    """A browser on the app's own pages (personal mode)."""
    with TestClient(create_app(settings), headers=SAME_ORIGIN) as test_client:
        yield test_client
