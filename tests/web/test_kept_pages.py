"""Pages kept rendered in memory show every change: a new name or labels, a model report that is replaced,
a corpus removed from a comparison's library."""

from __future__ import annotations

from collections import Counter

import pytest

from app.services import comparisons, modelling
from app.store import corpora as store
from app.web import pages
from tests.web.test_lab_mode import post_text, words_of


@pytest.fixture()
def renders(monkeypatch) -> Counter:
    """How many times each page template has been rendered (looked up to render) since the test began."""
    counts: Counter = Counter()
    original = pages.templates.env.get_template

    def counted(name, *args, **kwargs):
        counts[name] += 1
        return original(name, *args, **kwargs)

    monkeypatch.setattr(pages.templates.env, "get_template", counted)
    return counts


def two_corpora(client) -> list[int]:
    ids = []
    for name, (a, b) in (("First draft", (0, 1500)), ("Second draft", (1500, 3500))):
        answer = post_text(client, name, words_of(a, b))
        assert answer.status_code == 201, answer.text
        ids.append(answer.json()["id"])
    return ids


def test_corpus_and_comparison_pages_show_a_rename_at_once(client, renders, monkeypatch):
    first, second = two_corpora(client)
    compare = f"/compare?corpus={first}&corpus={second}"
    snapshots = []
    build = comparisons.build_snapshot
    monkeypatch.setattr(comparisons, "build_snapshot", lambda *a: snapshots.append(a) or build(*a))
    for _ in range(3):  # rendered once, then sent as kept
        assert "First draft" in client.get(f"/corpora/{first}").text
        assert "First draft" in client.get(compare).text
    assert (renders["corpus.html"], renders["compare.html"], len(snapshots)) == (1, 1, 1)

    changed = client.patch(
        f"/api/corpora/{first}", json={"name": "Revised draft", "labels": {"stage": "final"}}
    )
    assert changed.status_code == 200
    page = client.get(f"/corpora/{first}").text
    assert "Revised draft" in page and "First draft" not in page and "stage: final" in page
    comparison = client.get(compare).text
    assert "Revised draft" in comparison and "First draft" not in comparison
    assert (renders["corpus.html"], renders["compare.html"], len(snapshots)) == (2, 2, 2)


def test_corpus_page_follows_its_model_report(client):
    first, _ = two_corpora(client)
    engine = client.app.state.engine
    assert "types expected at" in client.get(f"/corpora/{first}").text

    # the report replaced by a stored failure (as a program version whose fit failed would leave it)
    store.store_cached_result(
        engine, first, modelling.MODELS_KIND, modelling.CACHE_KEY, {"error": "an invented reason"}
    )
    failed = client.get(f"/corpora/{first}").text
    assert "No vocabulary model could be fitted to this corpus: an invented reason." in failed
    assert "types expected at" not in failed

    modelling.compute_model_report(engine, first)
    page = client.get(f"/corpora/{first}").text
    assert "an invented reason" not in page and "No vocabulary model could be fitted" not in page
    assert "types expected at" in page  # the recommended model's prediction card is back


def test_library_shows_new_renamed_and_deleted_corpora_at_once(client, renders):
    first, second = two_corpora(client)
    for _ in range(3):  # rendered once, then sent as kept
        assert "First draft" in client.get("/").text
    assert renders["library.html"] == 1

    client.patch(f"/api/corpora/{first}", json={"name": "Revised draft"})
    assert "Revised draft" in client.get("/").text and "First draft" not in client.get("/").text

    third = post_text(client, "Third draft", words_of(3500, 5000)).json()["id"]
    assert f'href="/corpora/{third}"' in client.get("/").text

    assert client.delete(f"/api/corpora/{second}").status_code == 204
    library = client.get("/").text
    assert f'href="/corpora/{second}"' not in library and "Second draft" not in library
    assert "Revised draft" in client.get("/?search=revised").text
    assert "Third draft" not in client.get("/?search=revised").text
