"""Texts as the unit on the Comparison page: two files of ###-separated docstring paragraphs uploaded through
the Upload page, compared in headless Chromium; the page leads with the text-level tests, lists a short
text, shows keyness across texts and the word list's dispersion, and does not scroll sideways on a phone."""

from __future__ import annotations

import re

import pytest

from tests.e2e.conftest import VIEWPORTS, check_page, get_json, needs_chromium, open_page
from tests.web.test_compare_texts import paragraphs

pytestmark = [needs_chromium, pytest.mark.slow]


def test_comparison_of_collections_of_texts_in_a_browser(server, browser, tmp_path, stdlib_text, screenshots):
    collections = {
        "alpha": [*paragraphs(stdlib_text, 80, 12), "A very short note."],
        "beta": paragraphs(stdlib_text, 80, 10, skip=12),
    }
    context, page, console = open_page(browser, VIEWPORTS["desktop"])
    ids = []
    for name, texts in collections.items():
        source = tmp_path / f"{name}.txt"
        source.write_text("\n###\n".join(texts), encoding="utf-8")
        page.goto(f"{server}/upload")
        page.fill("input[name=name]", name)
        page.set_input_files("input[name=files]", str(source))
        page.fill("input[name=text_separator]", "###")
        page.click("#upload-form button[type=submit]")
        page.wait_for_url(re.compile(r".*/corpora/\d+$"), timeout=240_000)
        ids.append(int(page.url.rsplit("/", 1)[1]))
    assert "in texts (of 13)" in page.goto(f"{server}/corpora/{ids[0]}").text()
    query = f"corpus={ids[0]}&corpus={ids[1]}"
    page.goto(f"{server}/compare?{query}")
    section = page.locator("#text-tests").inner_text()
    assert "do the texts of one corpus have a richer vocabulary" in section
    assert "would random samples of" in section
    assert "alpha.txt #13 (4 tokens)" in section  # the short text is listed, left out
    html = page.content()
    assert html.index('id="text-tests"') < html.index('id="tests-table"')
    api = get_json(f"{server}/api/compare?{query}")
    [pair] = api["size_matched"]["text_tests"]
    row = page.locator("#text-tests-table tbody tr").first.inner_text()
    assert f"{pair['difference']:+.2f}" in row and f"{pair['p']:.4f}" in row
    assert page.locator("#keyness-table tbody tr").count() == len(api["distinctive_texts"]["words"]) > 0
    check_page(page, console, "desktop")
    page.locator("#text-tests").screenshot(path=screenshots / "compare-texts-desktop.png")
    print(f"\ntext-level: {row} | token-level: {page.locator('#tests-table tbody tr').first.inner_text()}")
    context.close()
    context, page, console = open_page(browser, VIEWPORTS["phone"])
    page.goto(f"{server}/compare?{query}")
    check_page(page, console, "phone")
    page.locator("#text-tests").screenshot(path=screenshots / "compare-texts-phone.png")
    context.close()
