"""Comparison pages and JSON routes through the real app: permalink round trips, validation, downloads and
escaping. Numbers are checked against scipy.stats.hypergeom (Baayen 2001, Word Frequency Distributions, ch. 2) on the uploaded texts."""

from __future__ import annotations

import csv
import html
import io
import json
import re

import numpy as np
import pytest
from fastapi.testclient import TestClient
from scipy.stats import hypergeom, norm

from app.config import Settings
from app.main import create_app
from app.services.comparisons import CAUTION, TABLE_COLUMNS
from tests.conftest import SAME_ORIGIN, stdlib_docstrings
from tests.web.test_api import expected_counts, upload

FIGURE_JSON = re.compile(r'<script type="application/json" id="([^"]+)-data">(.*?)</script>', re.S)


@pytest.fixture(scope="module")
def texts() -> list[str]:
    """Three stretches of real English (standard-library docstrings) of 1,500, 2,500 and 3,500 words."""
    words = re.findall(r"[a-z]+", stdlib_docstrings().lower())
    return [" ".join(words[a:b]) for a, b in ((0, 1500), (1500, 4000), (4000, 7500))]


def upload_two(client, texts: list[str]) -> list[int]:
    return [
        upload(client, name, text.encode(), labels=f"author={author}").json()["id"]
        for name, text, author in (("Alpha", texts[0], "Ames"), ("Beta", texts[1], "Bell"))
    ]


@pytest.fixture(scope="module")
def shared(tmp_path_factory, texts):
    """One app with the corpora Alpha (id 1) and Beta (id 2) for the tests that only read and save."""
    settings = Settings(data_dir=tmp_path_factory.mktemp("shared") / "data", load_demo=False, max_upload_mb=5)
    with TestClient(create_app(settings), headers=SAME_ORIGIN) as client:
        yield client, upload_two(client, texts)


def save(client, body: dict):
    return client.post("/api/comparisons", json=body)


def figures_of(page: str) -> dict[str, dict]:
    found = {}
    for name, body in FIGURE_JSON.findall(page):
        assert "<" not in body  # escaped for <script> context
        found[name] = json.loads(body)
    return found


def table_values(page: str, field: str) -> list[float]:
    return [float(v) for v in re.findall(rf'data-field="{field}" data-value="([^"]+)"', page)]


def test_api_comparison_numbers_equal_the_hypergeometric_expectation(shared, texts):
    client, two = shared
    response = save(client, {"corpora": two})
    assert response.status_code == 201, response.text
    body = response.json()
    assert body["url"] == f"/compare/{body['slug']}"
    saved = client.get(f"/api/comparisons/{body['slug']}").json()
    n0 = saved["size_matched"]["tokens"]
    assert n0 == 1500 and saved["settings"]["corpora"] == two
    for row, text in zip(saved["size_matched"]["rows"], texts[:2], strict=True):
        f = np.array(list(expected_counts(text).values()))
        # reference: scipy.stats.hypergeom, the chance that each type is missed by a sample of n0 tokens
        assert row["types"] == pytest.approx(float(np.sum(1 - hypergeom.pmf(0, f.sum(), f, n0))), rel=1e-9)
        # the range is the product's nominal 90%: +-1.645 sd (scipy.stats.norm.ppf(0.95)), as everywhere
        half = norm.ppf(0.95) * row["types_sd"]
        assert (row["types_low"], row["types_high"]) == pytest.approx(
            (row["types"] - half, row["types"] + half), rel=1e-12
        )
    assert saved["caution"] == CAUTION and saved["range_level"] == 0.9
    live = client.get("/api/compare", params={"corpus": two}).json()
    assert live["size_matched"] == saved["size_matched"]


def test_library_lets_you_pick_corpora_to_compare(shared):
    client, two = shared
    page = client.get("/").text
    assert '<form id="compare-form" method="get" action="/compare">' in page
    for cid in two:
        assert f'<input type="checkbox" name="corpus" value="{cid}"' in page
    assert 'id="compare-button"' in page and "Compare selected" in page
    assert "/static/compare.js" in page


def test_live_page_shows_caution_figures_table_and_saves_a_permalink(shared, texts):
    client, two = shared
    page = client.get("/compare", params={"corpus": two})
    assert page.status_code == 200
    text = page.text
    assert html.escape(CAUTION, quote=False) in text.replace("&#39;", "'")
    assert text.count("nominal 90% range") == 1 and "95%" not in text  # one level, said once
    figures = figures_of(text)
    assert set(figures) == {"growth-plot", "growth-share-plot", "legomena-plot", "rank-plot"}
    observed = [t for t in figures["growth-plot"]["data"] if t.get("meta", {}).get("role") == "observed"]
    assert [t["meta"]["corpus_id"] for t in observed] == two
    assert len({t["line"]["color"] for t in observed}) == 2  # one colour per corpus
    assert figures["rank-plot"]["layout"]["xaxis"]["type"] == "log"
    live = client.get("/api/compare", params={"corpus": two}).json()
    assert table_values(text, "types") == [r["types"] for r in live["size_matched"]["rows"]]
    assert "Save permalink" in text and 'action="/compare"' in text
    for url in re.findall(r'(?:src|href)="([^"]+)"', text):
        assert not re.match(r"(https?:)?//", url), url  # nothing from other origins

    saved = client.post("/compare", data={"corpus": [str(i) for i in two]}, follow_redirects=False)
    assert saved.status_code == 303
    slug_page = client.get(saved.headers["location"]).text
    assert table_values(slug_page, "types") == table_values(text, "types")
    assert "Copy link" in slug_page and saved.headers["location"] in slug_page


def test_permalink_page_is_unchanged_after_adding_and_shows_a_notice_after_deleting(shared, texts):
    client, two = shared
    gamma = upload(client, "Gamma", texts[2].encode(), labels="author=Cole").json()["id"]
    slug = save(client, {"corpora": [two[0], gamma], "common_size": 1200, "horizon": 9000}).json()["slug"]
    before_page = client.get(f"/compare/{slug}").text
    before_json = client.get(f"/api/comparisons/{slug}").json()
    assert before_json["settings"]["common_size"] == 1200 and before_json["settings"]["horizon"] == 9000

    delta = upload(client, "Delta", texts[1][:4000].encode()).json()["id"]
    assert client.get(f"/compare/{slug}").text == before_page
    assert client.get(f"/api/comparisons/{slug}").json() == before_json

    assert client.delete(f"/api/corpora/{gamma}").status_code == 204
    after = client.get(f"/compare/{slug}")
    assert after.status_code == 200
    assert "has been deleted from the library" in after.text and "Gamma" in after.text
    assert table_values(after.text, "types") == table_values(before_page, "types")
    after_json = client.get(f"/api/comparisons/{slug}").json()
    assert after_json["size_matched"] == before_json["size_matched"] and len(after_json["notices"]) == 1
    # a live view of the deleted corpus cannot be computed, and says why
    gone = client.get("/api/compare", params={"corpus": [two[0], gamma]})
    assert gone.status_code == 404 and f"no corpus with id {gamma}" in gone.json()["detail"]
    assert client.delete(f"/api/corpora/{delta}").status_code == 204


@pytest.mark.parametrize(
    ("body", "status", "message"),
    [
        ({"corpora": [1]}, 422, "between 2 and 8"),
        ({"corpora": list(range(1, 10_001))}, 422, "got 10,000"),
        ({"corpora": [1, 999]}, 404, "no corpus with id 999"),
        ({"corpora": [1, 2], "common_size": -5}, 422, "common_size must lie between 1"),
        ({"corpora": [1, 2], "common_size": 10**30}, 422, "common_size must lie between 1"),
        ({"corpora": [1, 2], "horizon": 10**40}, 422, "horizon must lie between 1"),
        ({"corpora": [1, 2], "pair": [1, 3]}, 422, "pair"),
        ({"corpora": [1, 2], "colour": "red"}, 422, "colour"),
    ],
)
def test_api_refuses_unusable_comparisons_with_a_message(shared, body, status, message):
    client, two = shared
    assert two == [1, 2]
    response = save(client, body)
    assert response.status_code == status
    assert message in json.dumps(response.json()["detail"])


@pytest.mark.parametrize(
    ("query", "status", "message"),
    [
        ("corpus=1", 422, "between 2 and 8"),
        ("corpus=1&corpus=77", 404, "no corpus with id 77"),
        ("corpus=1&corpus=2&common_size=abc", 422, "whole number"),
        ("corpus=1&corpus=2&common_size=-1", 422, "common_size must lie between 1"),
        ("corpus=1&corpus=2&horizon=99999999999999999999999999", 422, "horizon must lie between 1"),
    ],
)
def test_live_page_errors_are_pages_with_the_reason(shared, query, status, message):
    client, two = shared
    response = client.get(f"/compare?{query}")
    assert response.status_code == status
    assert "text/html" in response.headers["content-type"] and html.escape(message) in response.text


def test_a_bad_setting_is_shown_beside_its_form_and_the_comparison_with_its_default(shared):
    client, two = shared
    # the same corpus on both sides of the pair: the whole comparison, the problem beside the pair form
    response = client.get("/compare?corpus=1&corpus=2&first=2&second=2&min_freq=3&common_size=abc")
    assert response.status_code == 422 and 'id="size-matched-table"' in response.text
    page = response.text
    pair_form = page[page.index('id="pair-form"') : page.index('id="problem-pair"')]
    assert pair_form.count('value="2" selected') == 2  # both selects as chosen
    assert "two different compared corpora" in page[page.index('id="problem-pair"') :]
    assert 'name="common_size" value="abc"' in page and 'id="problem-common_size"' in page
    # the setting that holds is used: the words are tested at the typed minimum frequency
    assert 'name="min_freq" value="3"' in page and "at least 3 times" in page


def test_blank_form_fields_mean_the_defaults(shared):
    client, two = shared
    response = client.get("/compare?corpus=1&corpus=2&common_size=&horizon=&first=&second=&min_freq=&limit=")
    assert response.status_code == 200


def test_unknown_or_malformed_slugs_are_not_found(shared):
    client, two = shared
    assert client.get("/compare/AAAAAAAAAAAAAAAAAAAAAA").status_code == 404
    assert client.get("/api/comparisons/AAAAAAAAAAAAAAAAAAAAAA").status_code == 404
    assert client.get("/api/comparisons/x'--").status_code == 404


def test_downloads_table_csv_distinctive_csv_and_json(shared):
    client, two = shared
    slug = save(client, {"corpora": two, "min_freq": 3, "limit": 25}).json()["slug"]
    snapshot = client.get(f"/api/comparisons/{slug}").json()

    table = client.get(f"/api/comparisons/{slug}/table.csv")
    assert (
        table.headers["content-type"].startswith("text/csv")
        and "attachment" in table.headers["content-disposition"]
    )
    rows = list(csv.DictReader(io.StringIO(table.text)))
    assert list(rows[0]) == list(TABLE_COLUMNS)
    for row, expected in zip(rows, snapshot["size_matched"]["rows"], strict=True):
        assert float(row["types"]) == expected["types"] and int(row["corpus_id"]) == expected["corpus_id"]

    words = list(csv.DictReader(io.StringIO(client.get(f"/api/comparisons/{slug}/distinctive.csv").text)))
    assert [w["word"] for w in words] == [w["word"] for w in snapshot["distinctive"]["words"]]
    assert len(words) == 25 and all(int(w["count1"]) + int(w["count2"]) >= 3 for w in words)

    download = client.get(f"/api/comparisons/{slug}?download=1")
    assert f'filename="comparison-{slug}.json"' in download.headers["content-disposition"]
    assert download.json() == snapshot
    live = client.get("/api/compare/table.csv", params={"corpus": two})
    assert live.text == table.text


def test_corpus_names_are_text_on_the_page_in_figures_and_csv(shared, texts):
    client, two = shared
    hostile = "<script>alert(1)</script>"
    name = f'=HYPERLINK("x"){hostile}'
    other = upload(client, name, texts[2].encode(), labels="author=<img src=x onerror=alert(2)>").json()["id"]
    slug = save(client, {"corpora": [other, two[0]]}).json()["slug"]
    for page in (
        client.get(f"/compare/{slug}").text,
        client.get(f"/compare?corpus={other}&corpus={two[0]}").text,
    ):
        assert hostile not in page and "<img src=x" not in page
        assert html.escape(hostile) in page
        figures = figures_of(page)
        names = [
            t["name"] for t in figures["growth-plot"]["data"] if t.get("meta", {}).get("role") == "observed"
        ]
        # plotly.js shows entities literally, so the name appears as text in the legend
        assert html.unescape(names[0]).startswith(name) and "<" not in names[0]
    table = client.get(f"/api/comparisons/{slug}/table.csv").text
    assert "'=HYPERLINK" in table  # spreadsheet formula neutralised (OWASP CSV injection)
    assert client.delete(f"/api/corpora/{other}").status_code == 204


def test_different_profiles_are_warned_about(shared, texts):
    client, two = shared
    kept = upload(client, "Kept case", texts[2].encode(), profile="case-sensitive").json()["id"]
    page = client.get(f"/compare?corpus={two[0]}&corpus={kept}").text
    assert "different tokenization profiles" in page and "case-sensitive" in page
    assert "different tokenization profiles" not in client.get("/compare", params={"corpus": two}).text
    assert client.delete(f"/api/corpora/{kept}").status_code == 204


def test_distinctive_words_follow_the_chosen_pair_and_threshold(shared, texts):
    client, two = shared
    data = client.get(
        "/api/compare", params={"corpus": two, "first": two[1], "second": two[0], "min_freq": 10}
    ).json()["distinctive"]
    assert (data["first"], data["second"], data["min_freq"]) == (two[1], two[0], 10)
    c1, c2 = expected_counts(texts[1]), expected_counts(texts[0])
    assert data["tested"] == sum(1 for w in c1.keys() | c2.keys() if c1[w] + c2[w] >= 10)
    for word in data["words"]:
        assert (word["count1"], word["count2"]) == (c1[word["word"]], c2[word["word"]])


def test_a_comparison_saved_before_one_level_says_which_levels_its_numbers_have(shared):
    """A permalink keeps the numbers it showed: one saved while random-order bands were 95% ranges (its
    snapshot has no ``range_level``) says so instead of claiming 90%."""
    from sqlmodel import Session

    from app.store.tables import SavedComparison

    client, two = shared
    slug = save(client, {"corpora": two}).json()["slug"]
    with Session(client.app.state.engine) as session:
        row = session.get(SavedComparison, slug)
        snapshot = json.loads(row.snapshot_json)
        del snapshot["range_level"]
        row.snapshot_json = json.dumps(snapshot)
        session.add(row)
        session.commit()
    text = client.get(f"/compare/{slug}").text
    assert "nominal 90% range" not in text
    assert "are 95% ranges, the model-based ranges 90% ranges" in text


def test_spread_rows_without_numbers_say_why(client, texts):
    big = upload(client, "Long", texts[0].encode()).json()["id"]
    tiny = upload(
        client, "Note", b"the tide came in early and the boats stayed in the harbour all day"
    ).json()
    snapshot = client.get("/api/compare", params={"corpus": [big, tiny["id"]]}).json()
    rows = {r["corpus_id"]: r for r in snapshot["spread"]["rows"]}
    size = snapshot["spread"]["tokens"]
    assert size == tiny["tokens"]  # the common size: the smallest corpus
    # the long text's stretches were measured from 50 tokens on: none at the note's size, and it says so
    assert rows[big]["text_types"] is None and f"not at {size:,}" in rows[big]["missing"]
    short = rows[tiny["id"]]
    assert short["segments"] == 0 and short["text_types"] is None
    assert "too short" in short["missing"]
    assert short["random_types"] is not None  # random samples of its own size exist
    page = client.get("/compare", params={"corpus": [big, tiny["id"]]}).text
    table = page[page.index('id="spread-table"') : page.index('id="spread-note"')]
    assert "The text is too short" in table and "Stretches were measured from 50" in table


def test_a_comparison_saved_before_per_million_frequencies_still_shows_its_words(shared):
    """A permalink keeps the numbers it showed: one saved before the per-million frequencies and the log
    ratio's interval shows its words with those cells empty, not an error."""
    from sqlmodel import Session

    from app.store.tables import SavedComparison

    client, two = shared
    slug = save(client, {"corpora": two}).json()["slug"]
    with Session(client.app.state.engine) as session:
        row = session.get(SavedComparison, slug)
        snapshot = json.loads(row.snapshot_json)
        for word in snapshot["distinctive"]["words"]:
            for key in ("per_million1", "per_million2", "log_ratio_low", "log_ratio_high", "only_in"):
                del word[key]
        row.snapshot_json = json.dumps(snapshot)
        session.add(row)
        session.commit()
    page = client.get(f"/compare/{slug}")
    assert page.status_code == 200 and 'id="distinctive-table"' in page.text
    assert client.get(f"/api/comparisons/{slug}/distinctive.csv").status_code == 200
