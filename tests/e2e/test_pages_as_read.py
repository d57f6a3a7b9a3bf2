"""The pages as a researcher reads them, in headless Chromium at 1440 and 390 px: a label line without "="
kept as a note, a form's problem in view, a re-upload of the same text told as such, the same corpus on both
sides of a comparison answered beside its form, distinctive words of one corpus only marked as such, the
planning answer on the plot it refers to, deletions that ask first, a way back from the API documentation,
and no page scrolling sideways or logging an error."""

from __future__ import annotations

import math
import re
import time

import httpx
import pytest

from tests.conftest import stdlib_docstrings
from tests.e2e.conftest import (
    VIEWPORTS,
    check_page,
    get_json,
    in_view,
    needs_chromium,
    open_page,
    wait_until,
)

pytestmark = [pytest.mark.slow, needs_chromium]


def words(start: int, stop: int) -> str:
    return " ".join(re.findall(r"[a-z]+", stdlib_docstrings().lower())[start:stop])


@pytest.fixture(scope="module")
def two(server) -> list[int]:
    ids = []
    for name, (a, b) in (("Essays", (0, 9_000)), ("Letters", (9_000, 15_000))):
        response = httpx.post(
            f"{server}/api/corpora?wait=1",
            data={"name": name},
            files={"files": (f"{name}.txt", words(a, b).encode(), "text/plain")},
            timeout=300,
        )
        assert response.status_code == 201, response.text
        ids.append(response.json()["id"])
    return ids


@pytest.mark.parametrize("viewport", ["desktop", "phone"])
def test_labels_note_and_problem_in_view(server, browser, two, viewport, screenshots):
    cid = two[0]
    context, page, console = open_page(browser, VIEWPORTS[viewport])
    page.goto(f"{server}/corpora/{cid}")
    page.fill("#edit-form input[name=name]", f"Essays {viewport}")
    page.fill("#edit-form textarea[name=labels]", "author=Ada\nThis is a free text note")
    page.click("#edit-form button[type=submit]")
    page.wait_for_selector("#edit-saved")
    summary = get_json(f"{server}/api/corpora/{cid}")
    assert summary["name"] == f"Essays {viewport}"
    assert summary["labels"] == {"author": "Ada", "note": "This is a free text note"}
    check_page(page, console, viewport)
    # a problem: beside the form, in view, focused, everything typed kept, nothing saved
    page.fill("#edit-form input[name=name]", "Renamed?")
    page.fill("#edit-form textarea[name=labels]", "=no key")
    page.click("#edit-form button[type=submit]")
    page.wait_for_selector("#edit-error")
    wait_until(page, "document.activeElement && document.activeElement.id === 'edit-error'")
    assert in_view(page, "#edit-error") and "Nothing was saved" in page.inner_text("#edit-error")
    assert page.input_value("#edit-form input[name=name]") == "Renamed?"
    assert page.input_value("#edit-form textarea[name=labels]") == "=no key"
    assert get_json(f"{server}/api/corpora/{cid}")["name"] == f"Essays {viewport}"
    page.screenshot(path=screenshots / f"read-labels-problem-{viewport}.png")
    context.close()


@pytest.mark.parametrize("viewport", ["desktop", "phone"])
def test_upload_on_a_phone_and_a_re_upload_of_the_same_text(server, browser, two, viewport, screenshots):
    context, page, console = open_page(browser, VIEWPORTS[viewport])
    page.goto(f"{server}/upload")
    page.click("details.profiles summary")  # the folded table of profiles stays inside the screen
    check_page(page, console, viewport)
    page.fill("input[name=name]", f"Letters again {viewport}")
    page.fill("textarea[name=text]", words(9_000, 15_000))
    page.click("#upload-form button[type=submit]")
    page.wait_for_url(re.compile(r".*/corpora/\d+$"), timeout=240_000)
    notice = page.locator("#same-content")
    assert "uploaded before as" in notice.inner_text() and "Letters" in notice.inner_text()
    notice.locator("a").first.click()
    page.wait_for_url(re.compile(rf".*/corpora/{two[1]}$"))
    page.screenshot(path=screenshots / f"read-upload-again-{viewport}.png", full_page=True)
    context.close()


@pytest.mark.parametrize("viewport", ["desktop", "phone"])
def test_comparison_pair_problem_distinctive_words_and_confirmed_deletion(
    server, browser, two, viewport, screenshots
):
    context, page, console = open_page(browser, VIEWPORTS[viewport])
    page.goto(f"{server}/compare?corpus={two[0]}&corpus={two[1]}&min_freq=3")
    page.locator("#growth-plot").scroll_into_view_if_needed()  # drawn when in view
    page.wait_for_selector("#growth-plot .main-svg")
    check_page(page, console, viewport)
    # words of one corpus only: "only in", no ratio; the others a log ratio with its interval
    table = get_json(f"{server}/api/compare?corpus={two[0]}&corpus={two[1]}&min_freq=3")["distinctive"]
    rows = page.locator("#distinctive-table tbody tr")
    assert rows.count() == len(table["words"])
    for i, word in enumerate(table["words"][:20]):
        cells = rows.nth(i).locator("td").all_inner_texts()
        if word["only_in"]:
            assert cells[1].startswith("only in") and "×" not in cells[1] and cells[-1].strip() == "–"
        else:
            assert re.search(r"\(([+-]\d+\.\d\d) to ([+-]\d+\.\d\d)\)", cells[-1])
    # the same corpus on both sides: the problem beside the form, the comparison still there
    page.select_option("#pair-form select[name=second]", str(two[0]))
    page.select_option("#pair-form select[name=first]", str(two[0]))
    page.click("#pair-button")
    page.wait_for_selector("#problem-pair")
    assert "two different" in page.inner_text("#problem-pair")
    assert page.locator("#size-matched-table").count() == 1
    assert page.input_value("#pair-form select[name=second]") == str(two[0])
    wait_until(page, "document.activeElement && document.activeElement.id === 'problem-pair'")
    assert in_view(page, "#problem-pair")
    console.messages.clear()  # that answer was a 422, which Chromium logs
    page.screenshot(path=screenshots / f"read-compare-pair-{viewport}.png")
    # save, then delete from Saved comparisons: the first click only asks
    page.goto(f"{server}/compare?corpus={two[0]}&corpus={two[1]}")
    page.click("#save-permalink")
    page.wait_for_url(re.compile(r".*/compare/[A-Za-z0-9_-]{16}$"))
    slug = page.url.rsplit("/", 1)[1]
    page.goto(f"{server}/comparisons")
    row = page.locator(f"#comparisons-table tr[data-slug='{slug}']")
    row.locator("summary").click()
    assert any(r["slug"] == slug for r in get_json(f"{server}/api/comparisons"))
    assert row.locator("button").is_visible()
    check_page(page, console, viewport)
    row.locator("button").click()
    page.wait_for_selector("#deleted-notice")
    assert not any(r["slug"] == slug for r in get_json(f"{server}/api/comparisons"))
    context.close()


@pytest.mark.parametrize("viewport", ["desktop", "phone"])
def test_planning_answer_shown_on_its_plot_and_named_in_words(server, browser, two, viewport, screenshots):
    cid = two[1]
    deadline = time.monotonic() + 240
    while get_json(f"{server}/api/corpora/{cid}")["models"]["status"] != "ready":  # fitted by the worker
        assert time.monotonic() < deadline, "the models were never fitted"
        time.sleep(0.5)
    summary = get_json(f"{server}/api/corpora/{cid}")
    tokens, types = summary["tokens"], summary["types"]
    context, page, console = open_page(browser, VIEWPORTS[viewport])
    page.goto(f"{server}/corpora/{cid}#planning")
    assert page.get_attribute("#plan-form input[name=coverage]", "placeholder").startswith("e.g.")
    page.fill("#plan-form input[name=types]", str(2 * types))
    page.click("#plan-form button[type=submit]")
    page.wait_for_selector("#plan-answer, #planning .error-box")
    assert page.locator("#plan-answer").count() == 1, page.inner_text("#planning")
    page.locator("#growth-plot").scroll_into_view_if_needed()  # drawn when in view
    page.wait_for_selector("#growth-plot .main-svg")
    answer = get_json(f"{server}/api/corpora/{cid}/plan?types={2 * types}")["tokens"]
    assert answer > tokens
    # the plot opens where the answer lies: its x range holds it, and the extrapolated view is chosen
    assert page.is_checked("input[name=growth-plot-view][value=extrapolated]")
    low, high = page.evaluate("document.getElementById('growth-plot').layout.xaxis.range")
    log = page.evaluate("document.getElementById('growth-plot').layout.xaxis.type") == "log"
    position = math.log10(answer) if log else answer
    assert low < position < high
    check_page(page, console, viewport)
    page.screenshot(path=screenshots / f"read-planning-{viewport}.png", full_page=True)
    # a share of the population with the recommended model: models named in words
    page.goto(f"{server}/corpora/{cid}?share=0.9#planning")
    text = page.inner_text("#planning")
    if "population is infinite" in text:
        assert "bounded_power_law" not in text and "bounded power law" in text
    context.close()


@pytest.mark.parametrize("viewport", ["desktop", "phone"])
def test_documentation_leads_back_and_logs_no_error(server, browser, viewport):
    context, page, console = open_page(browser, VIEWPORTS[viewport])
    page.goto(f"{server}/docs")
    page.wait_for_selector(".swagger-ui .info")
    page.wait_for_timeout(500)  # the browser's request for an icon, if any, has been answered
    assert not console.problems(), console.problems()
    page.click("#back-to-dashboard")
    page.wait_for_url(f"{server}/")
    for path in ("/", "/upload", "/estimate", "/comparisons"):
        page.goto(f"{server}{path}")
        check_page(page, console, viewport)
    context.close()
