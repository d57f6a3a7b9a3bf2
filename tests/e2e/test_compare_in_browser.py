"""End to end in a real browser: upload two texts, pick them in the Library, open the comparison, save the
permalink and open it in a fresh browser context. The app runs under uvicorn in a subprocess on a free
loopback port with a temporary data folder; Chromium (Debian's package) is driven through Playwright.

The numbers on the page are compared with the JSON API, and the API with scipy.stats.hypergeom (Baayen
2001, Word Frequency Distributions, ch. 2) on the uploaded words. Screenshots of the Library, Corpus and Comparison pages are saved in the
screenshot folder (tests/e2e/conftest.py) for a person to look at.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest
from scipy.stats import hypergeom

from tests.conftest import stdlib_docstrings
from tests.e2e.conftest import TIMEOUT_MS, get_json, needs_chromium
from tests.web.test_api import expected_counts

pytestmark = [pytest.mark.slow, needs_chromium]


@pytest.fixture(scope="module")
def texts(tmp_path_factory) -> dict[str, Path]:
    """Two small text files of real English (standard-library docstrings): 1,200 and 2,000 words."""
    words = re.findall(r"[a-z]+", stdlib_docstrings().lower())
    folder = tmp_path_factory.mktemp("texts")
    files = {}
    for name, (a, b) in {"Alpha": (0, 1200), "Beta": (1200, 3200)}.items():
        files[name] = folder / f"{name.lower()}.txt"
        files[name].write_text(" ".join(words[a:b]), encoding="utf-8")
    return files


def table_numbers(page) -> list[tuple[float, str]]:
    """(data-value, shown text) of the E[V(n0)] cells of the size-matched table."""
    cells = page.locator('#size-matched-table td[data-field="types"]')
    return [(float(c.get_attribute("data-value")), c.inner_text()) for c in cells.all()]


def test_upload_compare_save_and_reopen_in_a_browser(server, browser, texts, screenshots):
    context = browser.new_context(viewport={"width": 1280, "height": 900}, accept_downloads=True)
    requests: list[str] = []
    errors: list[str] = []
    context.on("request", lambda request: requests.append(request.url))
    page = context.new_page()
    page.on("pageerror", lambda error: errors.append(str(error)))
    page.set_default_timeout(TIMEOUT_MS)

    # upload both texts through the Upload page, each ending on its corpus page
    for name, path in texts.items():
        page.goto(f"{server}/upload")
        page.fill("input[name=name]", name)
        page.set_input_files("input[name=files]", str(path))
        page.fill("textarea[name=labels]", f"author={name} Writer\nregister=docstrings")
        page.click("button[type=submit]")
        page.wait_for_url(re.compile(r".*/corpora/\d+$"))
        assert page.locator("h1").inner_text() == name
        if name == "Alpha":
            page.wait_for_selector("#growth-plot .main-svg")
            page.screenshot(path=screenshots / "corpus.png", full_page=True)

    # the Library: the button is enabled only for 2 to 8 ticked corpora
    page.goto(f"{server}/")
    button = page.locator("#compare-button")
    assert button.is_disabled()
    boxes = page.locator("input[name=corpus]")
    assert boxes.count() == 2
    boxes.nth(0).check()
    assert button.is_disabled()
    boxes.nth(1).check()
    assert button.is_enabled()
    page.screenshot(path=screenshots / "library.png", full_page=True)
    button.click()
    page.wait_for_url(re.compile(r".*/compare\?corpus=\d+&corpus=\d+$"))
    page.wait_for_selector("#growth-plot .main-svg")

    # one observed growth trace per corpus, drawn by plotly.js, with the corpus names in the legend
    observed = page.evaluate(
        "document.getElementById('growth-plot').data"
        ".filter(t => t.meta && t.meta.role === 'observed').map(t => t.meta.corpus_id)"
    )
    assert len(observed) == 2
    legend = page.locator("#growth-plot .legend").text_content()
    assert "Alpha" in legend and "Beta" in legend
    assert "not evidence of authorship or misconduct" in page.locator("#caution").inner_text()

    # the table shows the API's interpolated numbers, and the API the hypergeometric expectation
    live = get_json(f"{server}/api/compare?corpus={observed[0]}&corpus={observed[1]}")
    shown = table_numbers(page)
    n0 = live["size_matched"]["tokens"]
    assert n0 == 1200
    for (value, text), row, path in zip(shown, live["size_matched"]["rows"], texts.values(), strict=True):
        assert value == row["types"]
        assert text.startswith(f"{row['types']:,.1f} ± {row['types_sd']:,.1f}")
        f = np.array(list(expected_counts(path.read_text(encoding="utf-8")).values()))
        # reference: scipy.stats.hypergeom, the chance that each type is missed by a sample of n0 tokens
        assert value == pytest.approx(float(np.sum(1 - hypergeom.pmf(0, f.sum(), f, n0))), rel=1e-9)

    # plotly's toolbar saves the figure as PNG and SVG in the browser, without any other server
    for fmt in ("png", "svg"):
        page.hover("#growth-plot")
        with page.expect_download() as download:
            page.click(f'#growth-plot .modebar-btn[data-title*="{fmt.upper()}"]')
        assert download.value.suggested_filename == f"alpha-vs-beta-type-growth.{fmt}"

    # the growth axis switch shows the normalised figure and keeps the choice in the URL
    page.check("input[name=growth-scale][value=share]")
    page.wait_for_selector("#growth-share-plot .main-svg", state="visible")
    assert "scale=share" in page.url
    page.check("input[name=growth-scale][value=tokens]")
    page.screenshot(path=screenshots / "comparison.png", full_page=True)

    # save the permalink and open it in a fresh browser context
    page.click("#save-permalink")
    page.wait_for_url(re.compile(r".*/compare/[A-Za-z0-9_-]{16}$"))
    permalink = page.url
    assert page.locator("#permalink").input_value() == permalink
    assert table_numbers(page) == shown

    fresh = browser.new_context(viewport={"width": 1280, "height": 900})
    fresh.on("request", lambda request: requests.append(request.url))
    other = fresh.new_page()
    other.on("pageerror", lambda error: errors.append(str(error)))
    other.goto(permalink)
    other.wait_for_selector("#growth-plot .main-svg")
    assert table_numbers(other) == shown
    assert (
        other.locator("#size-matched-table").inner_text() == page.locator("#size-matched-table").inner_text()
    )
    fresh.close()
    context.close()

    assert not errors
    outside = [url for url in requests if not url.startswith((server + "/", "data:", "blob:"))]
    assert not outside, outside
