"""Texts on the user's path: a file of ###-separated texts uploaded through the Upload page, its texts and
growth by texts on the corpus page, and planning in texts, in headless Chromium."""

from __future__ import annotations

import re

import pytest

from tests.e2e.conftest import (
    VIEWPORTS,
    check_page,
    get_json,
    needs_chromium,
    open_page,
    wait_until,
)

pytestmark = [needs_chromium, pytest.mark.slow]

LETTERS = [
    "Dear Ines, the tide came in over the mud flats at dawn and the nets were wet.",
    "Dear Tomas, the keeper wrote that the lamp burned all night in the storm.",
    "Dear Ines, herring boats came back late and the harbour was full of gulls.",
    "Dear Tomas, rain again; the flats were under water by noon and the school closed.",
]


def test_upload_of_separated_texts_shows_them_on_the_corpus_page(server, browser, tmp_path, screenshots):
    source = tmp_path / "letters.txt"
    source.write_text("\n###\n".join(LETTERS) + "\n###\n\n###\n", encoding="utf-8")
    context, page, console = open_page(browser, VIEWPORTS["desktop"])
    page.goto(f"{server}/upload")
    page.fill("input[name=name]", "Letters by texts")
    page.set_input_files("input[name=files]", str(source))
    page.fill("input[name=text_separator]", "###")
    page.click("#upload-form button[type=submit]")
    page.wait_for_url(re.compile(r".*/corpora/\d+$"), timeout=240_000)
    corpus_id = int(page.url.rsplit("/", 1)[1])
    wait_until(page, "document.querySelectorAll('#texts-table tbody tr').length === 4")
    rows = page.locator("#texts-table tbody tr").all_inner_texts()
    api = get_json(f"{server}/api/corpora/{corpus_id}/texts")
    assert (
        [r.split("\t")[1] for r in rows]
        == [t["name"] for t in api["texts"]]
        == [f"letters.txt #{i}" for i in range(1, 5)]
    )
    summary = page.locator("#texts-summary").inner_text()
    assert "4 texts" in summary and "1 empty text without any word skipped" in summary
    page.wait_for_selector("#text-growth-plot .main-svg")
    wait_until(page, "document.getElementById('texts-summary').textContent.includes('Chao2')")
    page.fill("#text-plan-form input[name=types]", str(api["texts"][0]["types"] + 60))
    page.click("#text-plan-form button")
    wait_until(page, "document.getElementById('text-plan-answer').textContent.length > 0")
    answer = page.locator("#text-plan-answer").inner_text()
    assert re.search(r"About [\d,]+ more texts|Not applicable", answer), answer
    check_page(page, console, "desktop")
    page.locator("#texts").screenshot(path=screenshots / "texts-section-desktop.png")
    print(f"\ntexts section: {summary} | plan: {answer}")
    context.close()
    # On a phone the section fits the screen: its table scrolls inside its box, the page never sideways.
    context, page, console = open_page(browser, VIEWPORTS["phone"])
    page.goto(f"{server}/corpora/{corpus_id}#texts")
    wait_until(page, "document.querySelectorAll('#texts-table tbody tr').length === 4")
    page.wait_for_selector("#text-growth-plot .main-svg")
    # Every element of the section outside its table's scrolling box stays within the screen's width.
    widest = page.evaluate(
        """() => Math.max(...[...document.querySelectorAll('#texts *:not(svg *)')]
            .filter(e => !e.closest('.scroll')).map(e => e.getBoundingClientRect().right))"""
    )
    assert widest <= VIEWPORTS["phone"]["width"], f"the Texts section is {widest} px wide on a phone"
    assert not console.problems(), console.problems()
    page.locator("#texts").screenshot(path=screenshots / "texts-section-phone.png")
    context.close()
