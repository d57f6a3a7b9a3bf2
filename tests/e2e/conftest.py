"""Shared browser-test machinery: the real app under uvicorn on a free loopback port with a temporary store,
Debian's Chromium driven headless through Playwright, a page that records console messages, and a folder
for screenshots (LEXIGROWTH_SCREENSHOT_DIR, else a temporary folder; its path is printed)."""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

import pytest

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]
REPO = Path(__file__).resolve().parents[2]
TIMEOUT_MS = 30_000
DESKTOP = {"width": 1440, "height": 900}
PHONE = {"width": 390, "height": 844}
VIEWPORTS = {"desktop": DESKTOP, "phone": PHONE}

needs_chromium = pytest.mark.skipif(
    not CHROMIUM.exists(),
    reason="needs Debian's Chromium at /usr/bin/chromium (CI installs it: apt-get install chromium)",
)


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def get_json(url: str) -> dict:
    with urllib.request.urlopen(url, timeout=60) as response:
        return json.loads(response.read())


def start_server(data_dir: Path, extra_env: dict[str, str] | None = None):
    """Start the app under uvicorn; returns (process, base URL) once /api/health answers."""
    port = free_port()
    env = (
        os.environ
        | {"LEXIGROWTH_DATA_DIR": str(data_dir), "LEXIGROWTH_LOAD_DEMO": "false"}
        | (extra_env or {})
    )
    command = [sys.executable, "-m", "uvicorn", "app.main:create_app", "--factory"]
    process = subprocess.Popen(
        [*command, "--host", "127.0.0.1", "--port", str(port), "--log-level", "warning"], cwd=REPO, env=env
    )
    base = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 90
    while True:
        try:
            if get_json(f"{base}/api/health")["status"] == "ok":
                return process, base
        except OSError:
            if process.poll() is not None or time.monotonic() > deadline:
                process.kill()
                pytest.fail("the app did not start under uvicorn")
            time.sleep(0.2)


def stop_server(process) -> None:
    process.terminate()
    try:
        process.wait(timeout=10)
    except subprocess.TimeoutExpired:
        process.kill()


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    """The real app under uvicorn on a free loopback port, with an empty temporary store."""
    process, base = start_server(tmp_path_factory.mktemp("e2e") / "data")
    yield base
    stop_server(process)


@pytest.fixture(scope="module")
def browser():
    from playwright.sync_api import sync_playwright

    with sync_playwright() as playwright:
        chromium = playwright.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        yield chromium
        chromium.close()


@pytest.fixture(scope="session")
def screenshots() -> Path:
    folder = Path(
        os.environ.get("LEXIGROWTH_SCREENSHOT_DIR") or Path(tempfile.gettempdir()) / "lexigrowth-screenshots"
    )
    folder.mkdir(parents=True, exist_ok=True)
    print(f"\nscreenshots: {folder}")
    return folder


class Console:
    """Console messages, page errors and Content-Security-Policy violations seen by a browser page."""

    def __init__(self, page) -> None:
        self.messages: list[str] = []
        page.on("console", lambda m: self.messages.append(f"{m.type}: {m.text}"))
        page.on("pageerror", lambda e: self.messages.append(f"pageerror: {e}"))

    def problems(self) -> list[str]:
        return [m for m in self.messages if m.startswith(("error", "warning", "pageerror"))]


def open_page(browser, viewport: dict, **options):
    """A new context and page at ``viewport`` with its console recorded: (context, page, console)."""
    context = browser.new_context(viewport=viewport, **options)
    page = context.new_page()
    page.set_default_timeout(TIMEOUT_MS)
    return context, page, Console(page)


def page_width(page) -> int:
    """The width of the whole document: wider than the window means the page scrolls sideways."""
    return page.evaluate("document.documentElement.scrollWidth")


def wait_until(page, expression: str, timeout_s: float = 30) -> None:
    """Poll a JavaScript expression until it is true. (Playwright's wait_for_function polls with eval, which
    the app's Content-Security-Policy rightly refuses; page.evaluate does not need it.)"""
    deadline = time.monotonic() + timeout_s
    while not page.evaluate(expression):
        if time.monotonic() > deadline:
            raise AssertionError(f"never true: {expression}")
        page.wait_for_timeout(100)


def check_page(page, console, viewport: str) -> None:
    """No sideways scrolling of the page at this width, and a clean console."""
    assert page_width(page) <= VIEWPORTS[viewport]["width"], f"page scrolls sideways at {viewport}"
    assert not console.problems(), console.problems()


def in_view(page, selector: str) -> bool:
    """Whether the element lies within the window as it is scrolled now."""
    return page.evaluate(
        "s => { const r = document.querySelector(s).getBoundingClientRect();"
        " return r.top >= 0 && r.bottom <= window.innerHeight; }",
        selector,
    )
