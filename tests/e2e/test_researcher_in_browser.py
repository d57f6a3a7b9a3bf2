"""The dashboard as a researcher uses it, in headless Chromium at a desktop (1440x900) and a phone (390x844)
width: every form is typed into by hand, optional fields are left empty, the button is pressed and the answer
is read on the page. Each page is also checked for a clean console (no Content-Security-Policy violation),
for no sideways scrolling of the page, and saved as a screenshot (folder printed by tests/e2e/conftest.py).

Numbers read on a page are compared with the JSON API, and the API's numbers in tests/web with their outside
references (scipy.stats.hypergeom and others); here the reference for the planning answer is the model's own
forward prediction (predict at the planned size gives back the target).
"""

from __future__ import annotations

import re

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

TINY = (
    "A short note on the tide tables. The tide came in early and the boats stayed in the harbour. "
    "We counted the gulls on the wall and wrote the numbers in the book."
)


def words(start: int, stop: int) -> str:
    return " ".join(re.findall(r"[a-z]+", stdlib_docstrings().lower())[start:stop])


@pytest.fixture(scope="module")
def corpora(server) -> dict[str, int]:
    """Two corpora of real English (standard-library docstrings) stored through the JSON API, with labels
    that have short values (offered as filters) and a free-text note (searched, not offered)."""
    ids = {}
    for name, (a, b), labels in (
        (
            "Ada essays",
            (0, 12_000),
            "author=Ada\nregister=essays\nnote=drafts written in the winter of the flood",
        ),
        (
            "Bo letters",
            (12_000, 18_000),
            "author=Bo\nregister=letters\nnote=copied by hand from the parish box",
        ),
    ):
        response = httpx.post(
            f"{server}/api/corpora?wait=1",
            data={"name": name, "labels": labels},
            files={"files": (f"{name}.txt", words(a, b).encode(), "text/plain")},
            timeout=300,
        )
        assert response.status_code == 201, response.text
        ids[name] = response.json()["id"]
    return ids


def shoot(page, screenshots, name: str, viewport: str) -> None:
    page.screenshot(path=screenshots / f"{name}-{viewport}.png", full_page=True)


@pytest.mark.parametrize("viewport", ["desktop", "phone"])
def test_upload_pasted_tiny_text_warns_before_any_extrapolation(server, browser, screenshots, viewport):
    context, page, console = open_page(browser, VIEWPORTS[viewport])
    page.goto(f"{server}/upload")
    if viewport == "phone":  # the menu is collapsed behind its button on a phone
        assert not page.locator("#site-menu").is_visible()
        page.click("#nav-toggle")
        assert page.locator("#site-menu a[href='/estimate']").is_visible()
    page.fill("input[name=name]", f"Tide note {viewport}")
    page.fill("textarea[name=text]", TINY)  # labels left empty, default profile
    page.click("#upload-form button[type=submit]")
    # the upload answers once the corpus is counted and its models fitted (tens of seconds on a shared machine)
    page.wait_for_url(re.compile(r".*/corpora/\d+$"), timeout=240_000)
    warning = page.locator("#small-corpus-warning")
    assert "fewer than 1,000" in warning.inner_text()
    # the warning comes before the first extrapolated number (the card of types expected at 10x)
    assert "rough guess" in page.locator(".cards").inner_text()
    corpus_id = int(page.url.rsplit("/", 1)[1])
    summary = get_json(f"{server}/api/corpora/{corpus_id}")
    assert summary["tokens"] < 1000 and summary["warnings"] and "fewer than 1,000" in summary["warnings"][0]
    page.locator("#growth-plot").scroll_into_view_if_needed()  # drawn when in view
    page.wait_for_selector("#growth-plot .main-svg")
    check_page(page, console, viewport)
    shoot(page, screenshots, "upload-tiny-corpus", viewport)
    context.close()


@pytest.mark.parametrize("viewport", ["desktop", "phone"])
def test_corpus_page_forms_plots_and_layout(server, browser, corpora, screenshots, viewport):
    cid = corpora["Ada essays"]
    summary = get_json(f"{server}/api/corpora/{cid}")
    context, page, console = open_page(browser, VIEWPORTS[viewport])
    page.goto(f"{server}/corpora/{cid}")
    page.locator("#growth-plot").scroll_into_view_if_needed()  # drawn when in view
    page.wait_for_selector("#growth-plot .main-svg")
    shoot(page, screenshots, "corpus", viewport)
    check_page(page, console, viewport)

    # plots: one colour per model in both plots, models named in words, nothing named by its API id
    spectrum = page.evaluate(
        "document.getElementById('spectrum-plot').data.filter(t => t.type === 'scatter')"
        ".map(t => [t.name, t.line.color])"
    )
    growth = dict(
        page.evaluate(
            "document.getElementById('growth-plot').data.map(t => [t.name, t.line && t.line.color])"
        )
    )
    assert len(spectrum) >= 5
    for name, colour in spectrum:
        assert "_" not in name
        assert growth[name] == colour, name
    assert len({c for _, c in spectrum}) == len(spectrum)  # different models, different colours
    assert "#F0E442" not in {c.upper() for _, c in spectrum}  # no faint yellow line on white

    # the spectrum opens on a log count axis; the switch makes it linear
    assert page.evaluate("document.getElementById('spectrum-plot').layout.yaxis.type") == "log"
    page.check("input[name=spectrum-plot-view][value=linear]")
    wait_until(page, "document.getElementById('spectrum-plot').layout.yaxis.type === 'linear'")

    # the growth plot opens on the text's own range; the switch shows the extrapolation
    right = page.evaluate("document.getElementById('growth-plot').layout.xaxis.range[1]")
    assert right == pytest.approx(summary["tokens"])
    page.check("input[name=growth-plot-view][value=extrapolated]")
    wait_until(
        page, f"document.getElementById('growth-plot').layout.xaxis.range[1] > 5 * {summary['tokens']}"
    )

    # goodness of fit explained in a sentence, with an effect size beside p; backtest headings in words
    assert "p-value" in page.locator("#fit-note").inner_text()
    headings = page.locator("#models-table thead th")
    texts = [h.inner_text().replace("\n", " ") for h in headings.all()]
    assert "misfit" in texts and any(t.startswith("from a random") for t in texts)
    assert page.locator("#models-table th[title*='Fitted on random samples']").count() >= 1

    # the section index stays reachable at the top of the window after scrolling down
    page.evaluate("window.scrollTo(0, document.body.scrollHeight)")
    assert page.locator(".section-index").bounding_box()["y"] == pytest.approx(0, abs=2)
    if viewport == "phone":
        page.click(".section-index summary")
    page.click(".section-index a[href='#planning']")
    page.wait_for_timeout(300)
    top = page.locator("#planning").bounding_box()["y"]
    assert 0 <= top < VIEWPORTS[viewport]["height"] / 2

    # Planning: only a number of types typed, the other targets left empty, as a person does
    target = 2 * summary["types"]
    page.fill("#plan-form input[name=types]", str(target))
    page.click("#plan-form button[type=submit]")
    page.wait_for_selector("#plan-answer")
    answer = page.locator("#plan-answer").inner_text()
    assert f"types {target}" in answer and f"{target}.0" not in answer  # echoed as typed
    assert page.locator("#plan-form input[name=types]").input_value() == str(target)
    assert "new_type_rate=&" in page.url  # the browser did send the empty fields
    planned = get_json(f"{server}/api/corpora/{cid}/plan?types={target}")
    assert f"About {planned['tokens']:,.0f} tokens" in answer
    # reference: the model's forward prediction at the planned size gives back the target
    forward = get_json(f"{server}/api/corpora/{cid}/predict?tokens={round(planned['tokens'])}")
    assert forward["types"] == pytest.approx(target, rel=1e-3)
    shoot(page, screenshots, "corpus-planning", viewport)

    # a wrong value: the problem beside the form, the text kept, no error page
    page.fill("#plan-form input[name=types]", "")
    page.fill("#plan-form input[name=coverage]", "1.5")
    page.click("#plan-form button[type=submit]")
    page.wait_for_selector("#planning .field-error")
    assert "coverage: must be less than 1" in page.locator("#planning .field-error").inner_text()
    assert page.locator("#plan-form input[name=coverage]").input_value() == "1.5"
    assert page.locator("h1").inner_text() == "Ada essays"
    console.messages.clear()  # that page answered 422, which Chromium logs; the next ones must be clean

    # predictions at typed sizes; the wide table scrolls inside its box, with a cue on a phone
    page.fill("#growth-form input[name=sizes]", "5000, 3x")
    page.fill("#growth-form input[name=horizon]", "")
    page.click("#growth-form button[type=submit]")
    page.wait_for_selector("#predictions-table")
    first_cells = page.locator("#predictions-table tbody tr td:first-child").all_inner_texts()
    assert first_cells == ["5,000", f"{3 * summary['tokens']:,}"]
    cue = page.locator("#predictions .scroll-cue")
    assert cue.is_visible() == (viewport == "phone")
    check_page(page, console, viewport)

    # richness at a typed common size
    page.fill("#richness-form input[name=common_size]", "2000")
    page.click("#richness-form button[type=submit]")
    page.wait_for_selector("#richness table")
    assert "at the common size (2,000)" in page.locator("#richness table thead").inner_text()

    # word search
    page.fill("#word-search input[name=q]", "retur")
    page.click("#word-search button[type=submit]")
    found = page.locator("#words tbody td:nth-child(2)").all_inner_texts()
    assert found and all("retur" in w for w in found)
    count = get_json(f"{server}/api/corpora/{cid}/words?search=retur")["total"]
    assert f"{count:,} matching types" in page.locator("#word-search").inner_text()

    # a random sample of the size typed
    page.fill("#sample-form input[name=tokens]", "3000")
    page.click("#sample-form button[type=submit]")
    wait_until(page, "document.getElementById('sample-result').textContent.includes('expected for 3,000')")
    check_page(page, console, viewport)
    context.close()


@pytest.mark.parametrize("viewport", ["desktop", "phone"])
def test_estimator_in_both_modes(server, browser, screenshots, viewport):
    context, page, console = open_page(browser, VIEWPORTS[viewport])
    page.goto(f"{server}/estimate")
    # from totals: hapax legomena, sizes and planning left empty
    page.fill("#totals-form input[name=tokens]", "50000")
    page.fill("#totals-form input[name=types]", "8000")
    page.click("#totals-form button[type=submit]")
    page.wait_for_selector("#totals-table")
    assert "hapaxes=&" in page.url
    rows = page.locator("#totals-table tbody tr td:first-child").all_inner_texts()
    assert rows == ["5,000", "25,000", "50,000", "100,000", "500,000"]  # empty sizes: N/10, N/2, N, 2N, 10N
    sizes = [5000, 25000, 50000, 100000, 500000]
    api = httpx.post(f"{server}/api/estimate", json={"tokens": 50000, "types": 8000, "sizes": sizes}).json()
    shown = page.locator("#totals-table tbody tr td:nth-child(3)").all_inner_texts()
    assert shown == [f"{r['types']:,.0f}" for r in api["predictions"] if r["tokens"] in sizes]
    page.locator("#estimate-plot").scroll_into_view_if_needed()  # drawn when in view
    page.wait_for_selector("#estimate-plot .main-svg")
    check_page(page, console, viewport)
    shoot(page, screenshots, "estimator-totals", viewport)

    # with the hapax legomena and a planning target typed
    page.fill("#totals-form input[name=hapaxes]", "4400")
    page.fill("#totals-form input[name=plan_types]", "9000")
    page.click("#totals-form button[type=submit]")
    page.wait_for_selector("#plan-answer")
    assert "until 9000 types" in page.locator("#plan-answer").inner_text()

    # a typing mistake is shown beside the form, with the text kept
    page.fill("#totals-form input[name=types]", "8 thousand")
    page.click("#totals-form button[type=submit]")
    page.wait_for_selector("#totals-form .field-error")
    assert "types" in page.locator("#totals-form .field-error").inner_text()
    assert page.locator("#totals-form input[name=types]").input_value() == "8 thousand"
    console.messages.clear()  # that page answered 422, which Chromium logs

    # uniform design, draws left empty
    page.goto(f"{server}/estimate")
    page.fill("#uniform-form input[name=uniform_types]", "100")
    page.fill("#uniform-form input[name=repeats]", "4")
    page.click("#uniform-form button[type=submit]")
    page.wait_for_selector("#uniform-table")
    api = httpx.post(
        f"{server}/api/estimate/uniform", json={"types": 100, "repeats": 4, "draws": [400]}
    ).json()
    last = page.locator("#uniform-table tbody tr").last.inner_text()
    assert last.split("\t")[0].strip() == "400"
    assert f"{api['rows'][0]['types_exact']:,.2f}" in last
    check_page(page, console, viewport)
    shoot(page, screenshots, "estimator-uniform", viewport)
    context.close()


@pytest.mark.parametrize("viewport", ["desktop", "phone"])
def test_library_filters_and_comparison_settings(server, browser, corpora, screenshots, viewport):
    context, page, console = open_page(browser, VIEWPORTS[viewport])
    page.goto(f"{server}/")
    # label keys with their values as options; the free-text note is searched, not offered
    options = page.locator("#library-filter input[name=label]").evaluate_all("els => els.map(e => e.value)")
    assert "author=Ada" in options and "register=letters" in options
    assert not any(o.startswith("note=") for o in options)
    page.check("#library-filter input[value='author=Ada']")
    page.check("#library-filter input[value='author=Bo']")
    page.click("#library-filter button[type=submit]")
    names = page.locator("#library-table tbody td:nth-child(2)").all_inner_texts()
    assert sorted(names) == ["Ada essays", "Bo letters"]
    page.fill("#library-filter input[name=search]", "parish")
    page.click("#library-filter button[type=submit]")
    assert page.locator("#library-table tbody td:nth-child(2)").all_inner_texts() == ["Bo letters"]
    check_page(page, console, viewport)
    shoot(page, screenshots, "library-filtered", viewport)

    # compare the two, then type a common size above the smaller corpus
    page.goto(f"{server}/")
    for name in ("Ada essays", "Bo letters"):
        page.check(f"input[aria-label='select {name}']")
    page.click("#compare-button")
    page.locator("#growth-plot").scroll_into_view_if_needed()  # drawn when in view
    page.wait_for_selector("#growth-plot .main-svg")
    small = min(get_json(f"{server}/api/corpora/{i}")["tokens"] for i in corpora.values())
    page.fill("#settings-form input[name=common_size]", str(small + 1000))
    page.fill("#settings-form input[name=horizon]", "")  # empty: the default horizon
    page.click("#settings-button")
    page.wait_for_selector("#tests-table")
    row = page.locator("#tests-table tr.untested")
    assert row.count() == 1 and "not tested" in row.inner_text()
    assert "model-based" in page.locator("#size-matched-table").inner_text()
    assert "twice the largest corpus" in page.locator("#settings-form + .explain").inner_text()
    assert "not evidence of authorship or misconduct" in page.locator("#caution").inner_text()

    # distinctive words say in words where each word is more frequent, or that it occurs on one side only
    directions = page.locator("#distinctive-table td.direction").all_inner_texts()
    table = get_json(f"{server}/api/compare?{page.url.split('?', 1)[1]}")["distinctive"]
    names = {c["id"]: c["name"] for c in get_json(f"{server}/api/corpora")}
    assert len(directions) == len(table["words"])
    for shown, word in zip(directions, table["words"], strict=True):
        if word["only_in"]:
            side = "first" if word["only_in"] == 1 else "second"
            assert shown == f"only in {names[table[side]]}" and "×" not in shown
        else:
            side = "first" if word["log_ratio"] > 0 else "second"
            assert shown.startswith(f"more in {names[table[side]]}")
    page.locator("#legomena-plot").scroll_into_view_if_needed()  # drawn when in view
    page.wait_for_selector("#legomena-plot .main-svg")
    check_page(page, console, viewport)
    shoot(page, screenshots, "comparison-above-smallest", viewport)

    # save, list the saved comparisons, delete it again
    page.click("#save-permalink")
    page.wait_for_url(re.compile(r".*/compare/[A-Za-z0-9_-]{16}$"))
    slug = page.url.rsplit("/", 1)[1]
    assert page.locator("#settings-button").inner_text() == "Recompute with these settings"
    page.goto(f"{server}/comparisons")
    assert page.locator(f"#comparisons-table tr[data-slug='{slug}']").count() == 1
    assert any(row["slug"] == slug for row in get_json(f"{server}/api/comparisons"))
    check_page(page, console, viewport)
    shoot(page, screenshots, "saved-comparisons", viewport)
    page.click(f"#comparisons-table tr[data-slug='{slug}'] summary")  # "Delete…" asks first
    assert any(row["slug"] == slug for row in get_json(f"{server}/api/comparisons"))
    page.click(f"#comparisons-table tr[data-slug='{slug}'] button")
    page.wait_for_selector("#deleted-notice")
    assert not any(row["slug"] == slug for row in get_json(f"{server}/api/comparisons"))
    context.close()


def test_rename_relabel_and_delete_a_corpus_from_its_page(server, browser, screenshots):
    response = httpx.post(
        f"{server}/api/corpora?wait=1",
        data={"name": "Scratch"},
        files={"files": ("scratch.txt", words(20_000, 23_000).encode(), "text/plain")},
        timeout=300,
    )
    cid = response.json()["id"]
    context, page, console = open_page(browser, VIEWPORTS["phone"])
    page.goto(f"{server}/corpora/{cid}#manage")
    page.fill("#edit-form input[name=name]", "Scratch, renamed")
    page.fill("#edit-form textarea[name=labels]", "author=Cy\nregister=notes")
    page.click("#edit-form button[type=submit]")
    page.wait_for_selector("#edit-saved")
    assert page.locator("h1").inner_text() == "Scratch, renamed"
    assert get_json(f"{server}/api/corpora/{cid}")["labels"] == {"author": "Cy", "register": "notes"}
    # a label without a key: the problem beside the form, in view, the text kept
    page.fill("#edit-form textarea[name=labels]", "=just words")
    page.click("#edit-form button[type=submit]")
    page.wait_for_selector("#manage .error-box")
    assert page.locator("#edit-form textarea[name=labels]").input_value() == "=just words"
    wait_until(page, "document.activeElement && document.activeElement.id === 'edit-error'")
    assert page.locator("#edit-error").is_visible() and in_view(page, "#edit-error")
    console.messages.clear()  # that page answered 422, which Chromium logs
    check_page(page, console, "phone")
    shoot(page, screenshots, "corpus-manage", "phone")
    page.check("#delete-form input[name=confirm]")
    page.click("#delete-form button[type=submit]")
    page.wait_for_selector("#deleted-notice")
    assert "Scratch, renamed" in page.locator("#deleted-notice").inner_text()
    assert httpx.get(f"{server}/api/corpora/{cid}").status_code == 404
    context.close()
