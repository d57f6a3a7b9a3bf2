"""Plots as a reader gets them: the partial plotly.js bundle draws every plot of the corpus and comparison
pages with a clean console, plots below the fold are drawn when they scroll into view, and each plot saves
as SVG and PNG from the buttons under it."""

from __future__ import annotations

import re

import httpx
import pytest

from tests.conftest import stdlib_docstrings
from tests.e2e.conftest import DESKTOP, needs_chromium, open_page, wait_until

pytestmark = [pytest.mark.slow, needs_chromium]

SHOWN_PLOTS = (
    "[...document.querySelectorAll('.plot-area[data-figure]')].filter(el => el.getClientRects().length > 0)"
)


@pytest.fixture(scope="module")
def two(server) -> list[int]:
    text = re.findall(r"[a-z]+", stdlib_docstrings().lower())
    ids = []
    for name, (a, b) in (("Essays", (0, 9_000)), ("Letters", (9_000, 15_000))):
        response = httpx.post(
            f"{server}/api/corpora?wait=1",
            data={"name": name},
            files={"files": (f"{name}.txt", " ".join(text[a:b]).encode(), "text/plain")},
            timeout=300,
        )
        assert response.status_code == 201, response.text
        ids.append(response.json()["id"])
    return ids


def drawn(page) -> dict[str, bool]:
    return dict(page.evaluate(f"{SHOWN_PLOTS}.map(el => [el.id, !!el.querySelector('.main-svg')])"))


def scroll_to_bottom(page) -> None:
    for _ in range(40):
        page.mouse.wheel(0, 600)
        page.wait_for_timeout(100)


def test_partial_bundle_draws_below_the_fold_on_scrolling(server, browser, two):
    context, page, console = open_page(browser, DESKTOP)
    loaded = []
    page.on("request", lambda request: loaded.append(request.url))
    page.goto(f"{server}/corpora/{two[0]}")
    page.wait_for_selector("#spectrum-plot .main-svg")
    assert any("/static/vendor/plotly-basic.min.js?v=" in url for url in loaded)
    assert not any(url.endswith("/plotly.min.js") for url in loaded)  # the full bundle is not fetched
    page.wait_for_timeout(1000)
    before = drawn(page)
    below = page.evaluate(
        f"{SHOWN_PLOTS}.filter(el => el.getBoundingClientRect().top > 3 * innerHeight).map(el => el.id)"
    )
    assert "rank-plot" in below and not before["rank-plot"]  # not drawn while out of view
    heights = page.evaluate(f"{SHOWN_PLOTS}.map(el => el.getBoundingClientRect().height)")
    assert min(heights) >= 300  # an undrawn plot keeps its space
    scroll_to_bottom(page)
    wait_until(page, f"{SHOWN_PLOTS}.every(el => el.querySelector('.main-svg'))")
    assert not console.problems(), console.problems()

    page.goto(f"{server}/compare?corpus={two[0]}&corpus={two[1]}")
    page.wait_for_selector("#growth-plot .main-svg")
    scroll_to_bottom(page)
    wait_until(page, f"{SHOWN_PLOTS}.every(el => el.querySelector('.main-svg'))")
    assert not console.problems(), console.problems()
    context.close()


@pytest.mark.parametrize("fmt", ["svg", "png"])
def test_every_plot_saves_as_svg_and_png(server, browser, two, fmt):
    context, page, console = open_page(browser, DESKTOP, accept_downloads=True)
    page.goto(f"{server}/corpora/{two[0]}")
    buttons = page.locator(f"button[data-download-format={fmt}]")
    assert buttons.count() == page.locator(".plot-area[data-figure]").count()
    button = page.locator(f'button[data-plot="rank-plot"][data-download-format={fmt}]')
    button.scroll_into_view_if_needed()
    with page.expect_download() as download:
        button.click()
    assert download.value.suggested_filename == f"essays-rank-frequency.{fmt}"
    head = download.value.path().read_bytes()[:200]
    assert head.startswith(b"\x89PNG") if fmt == "png" else b"<svg" in head
    assert not console.problems(), console.problems()
    context.close()
