"""Signing in to a lab-mode dashboard in a real browser: a wrong password is answered beside the form with the
name kept, the right one opens the page that was asked for; at desktop and phone widths."""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from tests.e2e.conftest import (
    REPO,
    VIEWPORTS,
    needs_chromium,
    open_page,
    page_width,
    start_server,
    stop_server,
)

pytestmark = [pytest.mark.slow, needs_chromium]
PASSWORD = "a long pass phrase for the test"


@pytest.fixture(scope="module")
def lab_server(tmp_path_factory):
    """The app in lab mode with one member, made with the command line as an admin would."""
    data = tmp_path_factory.mktemp("lab") / "data"
    env = os.environ | {"LEXIGROWTH_DATA_DIR": str(data), "LEXIGROWTH_LOAD_DEMO": "false"}
    made = subprocess.run(
        [str(Path(sys.executable).parent / "lexigrowth"), "user", "add", "ines", "--password-stdin"],
        input=PASSWORD + "\n",
        text=True,
        capture_output=True,
        cwd=REPO,
        env=env,
    )
    assert made.returncode == 0, made.stderr
    process, base = start_server(data)
    yield base
    stop_server(process)


@pytest.mark.parametrize("viewport", ["desktop", "phone"])
def test_sign_in_form(lab_server, browser, screenshots, viewport):
    context, page, console = open_page(browser, VIEWPORTS[viewport])
    page.goto(f"{lab_server}/estimate")
    page.wait_for_url(re.compile(r".*/login.*"))
    page.fill("#login-form input[name=name]", "ines")
    page.fill("#login-form input[name=password]", "not the password")
    page.click("#login-form button[type=submit]")
    page.wait_for_selector("#login-error")
    assert page.locator("#login-form input[name=name]").input_value() == "ines"
    # the refused sign-in answers 401 (Chromium logs that status); the page after signing in must be clean
    console.messages.clear()
    page.fill("#login-form input[name=password]", PASSWORD)
    page.click("#login-form button[type=submit]")
    page.wait_for_url(re.compile(r".*/estimate$"))
    if viewport == "phone":
        page.click("#nav-toggle")
    assert page.locator(".member-name").inner_text() == "ines"
    assert page_width(page) <= VIEWPORTS[viewport]["width"]
    assert not console.problems(), console.problems()
    page.screenshot(path=screenshots / f"signed-in-{viewport}.png", full_page=True)
    context.close()
