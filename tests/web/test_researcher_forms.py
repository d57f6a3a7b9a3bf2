"""What a browser sends and what the pages and API make of it (without a browser): empty optional fields,
errors beside the form, the small-text warning, the model catalogue, names of our own, the spectrum download,
compressed and cached assets, the Library's filters, renaming and saved comparisons."""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from scipy.spatial.distance import cityblock

from app.config import PROGRAM_VERSION
from app.core.models import MODELS
from app.core.models.goodness import spectrum_misfit
from app.services import library, modelling
from app.store import corpora as store
from app.web.forms import FormInput, parse_number
from tests.conftest import stdlib_docstrings
from tests.web.test_api import GETTYSBURG, upload
from tests.web.test_lab_mode import bearer, lab  # noqa: F401  (the lab-mode app with three members)


@pytest.fixture()
def corpus(client):
    words = re.findall(r"[a-z]+", stdlib_docstrings().lower())[:6000]
    cid = upload(
        client, "Docs", " ".join(words).encode(), labels="author=Ada\nnote=a long free-text note"
    ).json()
    return client, cid["id"]


def figures_of(html: str) -> dict[str, dict]:
    found = re.findall(r'<script type="application/json" id="([^"]+)-data">(.*?)</script>', html, re.S)
    return {name: json.loads(body) for name, body in found}


def test_numbers_as_typed_are_read_and_blank_is_not_given():
    assert parse_number("30,000") == 30000 and parse_number(" 1e6 ") == 1e6 and parse_number("0.001") == 0.001
    for bad in ("8 thousand", "1.2.3", "inf", "nan", "--1"):
        with pytest.raises(ValueError):
            parse_number(bad)
    form = FormInput({"a": "", "b": "  ", "c": "12", "d": "0", "e": "2.5"})
    assert form.number("a", "a") is None and form.number("b", "b") is None and not form.errors
    assert form.number("c", "c", whole=True) == 12
    assert form.number("d", "d", above=0) is None and form.errors["d"] == "d: must be more than 0"
    assert form.number("e", "e", whole=True) is None and "whole number" in form.errors["e"]


def test_browser_style_empty_fields_in_planning_and_estimator(corpus):
    client, cid = corpus
    # what a browser sends for the Planning form with only a number of types typed
    query = "types=3000&new_type_rate=&coverage=&share=&plan_model=recommended"
    assert (
        client.get(f"/api/corpora/{cid}/plan?{query.replace('&plan_model=recommended', '')}").status_code
        == 200
    )
    page = client.get(f"/corpora/{cid}?{query}")
    assert page.status_code == 200 and 'id="plan-answer"' in page.text
    assert 'value="3000"' in page.text and "3000.0" not in page.text
    # a bad value: the page itself (422) with the problem beside the form and the text kept
    page = client.get(f"/corpora/{cid}?types=&new_type_rate=&coverage=1.5&share=")
    assert (
        page.status_code == 422
        and "coverage: must be less than 1" in page.text
        and 'value="1.5"' in page.text
    )
    assert '<h1 id="top">Docs</h1>' in page.text
    two = client.get(f"/corpora/{cid}?types=3000&coverage=0.9")
    assert two.status_code == 422 and "Fill in one target only" in two.text

    estimate = "/estimate?tokens=50000&types=8000&hapaxes=&sizes=&plan_types=&plan_new_type_rate="
    page = client.get(estimate)
    assert page.status_code == 200 and 'id="totals-table"' in page.text
    page = client.get(estimate.replace("types=8000", "types=eight"))
    assert page.status_code == 422 and "types: &#39;eight&#39; is not a number" in page.text
    assert 'value="eight"' in page.text
    page = client.get("/estimate?uniform_types=100&repeats=4&draws=")
    assert page.status_code == 200 and 'id="uniform-table"' in page.text
    body = {"tokens": 50000, "types": 8000, "hapaxes": "", "plan_types": "", "plan_new_type_rate": ""}
    assert client.post("/api/estimate", json=body).status_code == 200


def test_small_texts_are_warned_about_before_any_extrapolation(client):
    cid = upload(client, "Speech", GETTYSBURG.encode()).json()["id"]
    summary = client.get(f"/api/corpora/{cid}").json()
    assert summary["tokens"] < 1000 and "fewer than 1,000" in summary["warnings"][0]
    html = client.get(f"/corpora/{cid}").text
    assert html.index('id="small-corpus-warning"') < html.index('class="cards"')
    for name, fig in figures_of(html).items():  # a tiny text's unbounded band edges are gaps, not Infinity
        assert "Infinity" not in json.dumps(fig), name
    # many tokens but a handful of types (a short word list, repeated): warned about by its types
    words = " ".join(["alpha", "beta", "gamma", "delta", "tide", "gull", "boat"] * 400)
    listed = upload(client, "Word list", words.encode()).json()
    assert listed["tokens"] == 2800 and listed["types"] == 7
    assert "only 7 different words" in listed["warnings"][0]
    assert 'id="small-corpus-warning"' in client.get(f"/corpora/{listed['id']}").text


def test_model_catalogue_and_descriptive_parameter_names(corpus):
    client, cid = corpus
    catalogue = client.get("/api/models").json()
    ids = [m["id"] for m in catalogue]
    assert ids == ["sample", *MODELS, "recommended"]
    fitted = client.get(f"/api/corpora/{cid}/models").json()["fitted"]
    for model in catalogue:
        assert model["name"] and model["formula"]
        names = [p["name"] for p in model["parameters"]]
        assert all(len(n) > 2 for n in names), names  # no single-letter parameter names
        if model["id"] in fitted:
            assert list(fitted[model["id"]]["params"]) == names
    assert [p["name"] for p in catalogue[ids.index("power_law")]["parameters"]] == [
        "exponent",
        "max_probability",
    ]
    html = client.get(f"/corpora/{cid}").text
    assert "LNRE" not in html and "(LNRE)" not in client.get("/openapi.json").text


def test_cached_reports_of_another_schema_are_not_read(corpus):
    client, cid = corpus
    engine = client.app.state.engine
    old = modelling.model_report(engine, cid)
    stale = json.loads(json.dumps(old))
    for data in stale["fitted"].values():
        data["params"] = {"a": 0.5, "B": 0.1}  # parameter names of an earlier version
    store.store_cached_result(engine, cid, "models", PROGRAM_VERSION, stale)
    with pytest.raises(modelling.ModelsPendingError):  # never read: the report is computed again
        modelling.model_report(engine, cid)
    again = client.get(f"/api/corpora/{cid}/models").json()  # (by a task, here in the request's thread)
    assert again["fitted"]["power_law"]["params"].keys() == {"exponent", "max_probability"}


def test_misfit_is_half_the_city_block_distance_over_the_types():
    observed, expected = np.array([50.0, 20, 9, 4]), np.array([47.5, 22.0, 8.0, 5.5])
    # reference: scipy.spatial.distance.cityblock (sum of absolute differences)
    assert spectrum_misfit(observed, expected, 100) == pytest.approx(cityblock(observed, expected) / 200)


def test_model_table_explains_goodness_of_fit_and_names_backtests(corpus):
    client, cid = corpus
    html = client.get(f"/corpora/{cid}").text
    assert 'id="fit-note"' in html and ">misfit<" in html
    assert re.search(
        r'<th class="num" title="Fitted on random samples of 10% of the tokens[^"]*">from a random 10%', html
    )
    assert "from the first 50%" in html


def test_spectrum_download_in_our_own_layout(corpus):
    client, cid = corpus
    lines = client.get(f"/api/corpora/{cid}/spectrum.tsv").text.splitlines()
    assert lines[0] == "# Lexigrowth frequency spectrum" and "# corpus: Docs (id 1)" in lines
    header = [line for line in lines if not line.startswith("#")][0]
    assert header == "occurrences\ttypes"
    # the JSON twin keeps its shape
    spectrum = client.get(f"/api/corpora/{cid}/spectrum").json()
    assert set(spectrum) == {"tokens", "types", "rows", "offset", "spectrum", "download"}
    assert spectrum["spectrum"][0][0] == 1 and len(spectrum["spectrum"]) == spectrum["rows"]


def test_assets_are_compressed_cached_and_plotly_styles_served_as_a_sheet(client):
    js = client.get("/static/vendor/plotly-basic.min.js", headers={"Accept-Encoding": "gzip"})
    assert js.headers["content-encoding"] == "gzip"
    assert js.headers["cache-control"] == "public, max-age=31536000, immutable"
    assert js.headers["etag"] and len(js.content) > 1_000_000  # httpx has decompressed it
    again = client.get("/static/vendor/plotly-basic.min.js", headers={"If-None-Match": js.headers["etag"]})
    assert again.status_code == 304
    # the partial bundle: 1.19 MB, 395 kB compressed (the full bundle: 4.8 MB, 1.47 MB compressed)
    assert int(js.headers["content-length"]) < 500_000
    assert js.text.startswith("/**\n* plotly.js (basic - minified) v4.")  # its licence header is kept
    css = client.get("/static/vendor/plotly.css").text
    assert ".js-plotly-plot .plotly .modebar{position:absolute;" in css
    own = client.get("/static/app.js", headers={"Accept-Encoding": "gzip"})
    assert own.headers["content-encoding"] == "gzip" and "max-age" in own.headers["cache-control"]
    assert own.headers["etag"]


def test_library_filter_options_and_search():
    corpora = [
        {"name": "A", "labels": {"author": "Ada", "register": "essays", "note": "x" * 60}},
        {"name": "B", "labels": {"author": "Bo", "register": "letters", "note": "parish box"}},
        {"name": "C", "labels": {"author": "Cy", "register": "letters"}},
    ]
    filters = library.label_filter(corpora)
    assert filters.options == {"author": ["Ada", "Bo", "Cy"], "register": ["essays", "letters"]}
    assert filters.free_text_keys == ["note"]
    pick = library.filter_corpora
    assert [c["name"] for c in pick(corpora, ["author=Ada", "author=Bo"])] == ["A", "B"]
    assert [c["name"] for c in pick(corpora, ["author=Bo", "author=Cy", "register=letters"])] == ["B", "C"]
    assert [c["name"] for c in pick(corpora, ["register=letters"], "PARISH")] == ["B"]


def test_library_page_renames_and_saved_comparisons(corpus):
    client, cid = corpus
    other = upload(client, "Speech", GETTYSBURG.encode(), labels="author=Bo").json()["id"]
    page = client.get("/", params=[("label", "author=Ada"), ("label", "author=Bo")])
    assert page.text.count('name="corpus"') == 2 and 'value="note=' not in page.text
    assert client.get("/", params={"search": "free-text"}).text.count('name="corpus"') == 1

    changed = client.patch(f"/api/corpora/{cid}", json={"name": "Docs 2", "labels": {"author": "Ada L."}})
    assert changed.status_code == 200 and changed.json()["labels"] == {"author": "Ada L."}
    answer = client.post(f"/corpora/{cid}/edit", data={"name": "", "labels": ""}, follow_redirects=False)
    assert answer.status_code == 422 and "a corpus needs a name" in answer.text

    slug = client.post("/api/comparisons", json={"corpora": [cid, other]}).json()["slug"]
    listed = client.get("/api/comparisons").json()
    assert (
        listed[0]["slug"] == slug and listed[0]["corpora"] == ["Docs 2", "Speech"] and listed[0]["may_delete"]
    )
    assert slug in client.get("/comparisons").text
    # the page's Delete asks first: without the confirmation nothing is deleted
    assert client.post(f"/comparisons/{slug}/delete", follow_redirects=False).status_code == 422
    assert client.get("/api/comparisons").json()[0]["slug"] == slug
    confirmed = client.post(f"/comparisons/{slug}/delete", data={"confirm": "yes"}, follow_redirects=False)
    assert confirmed.status_code == 303
    assert client.get("/api/comparisons").json() == []
    slug = client.post("/api/comparisons", json={"corpora": [cid, other]}).json()["slug"]
    assert client.delete(f"/api/comparisons/{slug}").status_code == 204
    assert client.get("/api/comparisons").json() == []
    assert (
        client.post(f"/corpora/{other}/delete", data={"confirm": "yes"}, follow_redirects=False).status_code
        == 303
    )
    assert client.get(f"/api/corpora/{other}").status_code == 404


def test_one_label_reading_for_page_api_and_upload_keeps_lines_without_equals_as_a_note(corpus):
    client, cid = corpus
    typed = "author=Ada\nThis is a free text note\nnote=second thought\n\nregister = letters"
    wanted = {"author": "Ada", "register": "letters", "note": "This is a free text note; second thought"}
    answer = client.post(
        f"/corpora/{cid}/edit", data={"name": "Docs renamed", "labels": typed}, follow_redirects=False
    )
    assert answer.status_code == 303
    summary = client.get(f"/api/corpora/{cid}").json()
    assert summary["name"] == "Docs renamed" and summary["labels"] == wanted
    assert client.patch(f"/api/corpora/{cid}", json={"labels": typed}).json()["labels"] == wanted
    uploaded = upload(client, "Speech", GETTYSBURG.encode(), labels=typed).json()
    assert uploaded["labels"] == wanted
    # a bad label changes nothing, the rename of the same submit included, and says so beside the form
    answer = client.post(f"/corpora/{cid}/edit", data={"name": "Lost?", "labels": "=no key"})
    assert answer.status_code == 422 and "Nothing was saved" in answer.text
    assert 'value="Lost?"' in answer.text and "=no key</textarea>" in answer.text
    assert client.get(f"/api/corpora/{cid}").json()["name"] == "Docs renamed"


def test_a_re_upload_of_the_same_content_says_so_and_offers_the_earlier_corpus(client):
    first = upload(client, "Speech", GETTYSBURG.encode()).json()
    assert first["same_content"] == []
    # the same text again, under another name: still stored as a corpus of its own, and told so
    again = upload(client, "Speech again", GETTYSBURG.encode(), filename="copy.txt")
    assert again.status_code == 201
    second = again.json()
    assert second["id"] != first["id"]
    assert [c["id"] for c in second["same_content"]] == [first["id"]]
    assert [c["url"] for c in client.get(f"/api/corpora/{second['id']}").json()["same_content"]] == [
        f"/corpora/{first['id']}"
    ]
    page = client.get(f"/corpora/{second['id']}").text
    notice = page[page.index('id="same-content"') :].split("</p>", 1)[0]
    assert "uploaded before as" in notice and f'href="/corpora/{first["id"]}"' in notice
    assert "uploaded again later" in client.get(f"/corpora/{first['id']}").text
    other = upload(client, "Other", b"a different text altogether with other words").json()
    assert (
        other["same_content"] == [] and 'id="same-content"' not in client.get(f"/corpora/{other['id']}").text
    )
    # the kept page of the first corpus forgets the copy once it is deleted
    client.delete(f"/api/corpora/{second['id']}")
    assert 'id="same-content"' not in client.get(f"/corpora/{first['id']}").text


def test_in_lab_mode_only_the_owner_or_an_admin_changes_a_corpus_or_deletes_a_comparison(lab):  # noqa: F811
    client = lab.client()
    ben, cleo, ada = (bearer(lab.tokens[name]) for name in ("ben", "cleo", "ada"))
    first = lab.corpora[0]  # uploaded by ben
    refused = client.patch(f"/api/corpora/{first}", json={"name": "taken"}, headers=cleo)
    assert refused.status_code == 403
    assert client.patch(f"/api/corpora/{first}", json={"name": "Alpha"}, headers=ben).status_code == 200
    assert client.patch(f"/api/corpora/{first}", json={"labels": "group=A"}, headers=ada).status_code == 200
    slug = client.post("/api/comparisons", json={"corpora": lab.corpora}, headers=ben).json()["slug"]
    mine = {row["slug"]: row["may_delete"] for row in client.get("/api/comparisons", headers=cleo).json()}
    assert mine[slug] is False
    assert client.delete(f"/api/comparisons/{slug}", headers=cleo).status_code == 403
    assert client.delete(f"/api/comparisons/{slug}", headers=ben).status_code == 204
    page, _ = lab.signed_in("cleo")
    assert "Only the member who uploaded this corpus" in page.get(f"/corpora/{first}").text
