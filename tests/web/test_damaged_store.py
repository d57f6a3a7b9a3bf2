"""Rows no version of this program writes (edited by hand, or left by another program) disable the section
that needs them, with a message, instead of failing the page (issue: a forged bundle's text-order statistics
made its page and every comparison including it fail)."""

from __future__ import annotations

from sqlalchemy import update
from sqlmodel import Session

from app.store.tables import CachedResult, Corpus, SpectrumRow


def _word(i: int) -> str:
    """A distinct word for each number (the default profile drops digits): 12 -> "wbc"."""
    return "w" + "".join(chr(ord("a") + int(d)) for d in str(i))


TEXT = " ".join(f"alpha beta {_word(i)} {_word(i % 50)} gamma" for i in range(400))


def _upload(client, name: str, text: str = TEXT) -> int:
    response = client.post("/api/corpora?wait=1", data={"name": name, "text": text})
    assert response.status_code == 201, response.text
    return response.json()["id"]


def _damage(client, statement) -> None:
    with Session(client.app.state.engine) as session:
        session.execute(statement)
        session.commit()


def test_damaged_text_order_and_labels_disable_their_sections_only(client):
    damaged = _upload(client, "hand-edited")
    other = _upload(client, "intact", TEXT.replace("alpha", "delta"))
    _damage(
        client,
        update(Corpus)
        .where(Corpus.id == damaged)
        .values(text_order_json='{"mattr": "<b>x</b>"}', labels_json="[1, 2]"),
    )
    page = client.get(f"/corpora/{damaged}")
    assert page.status_code == 200
    assert 'id="damaged-fields"' in page.text and "labels" in page.text
    assert 'id="damaged-text_order"' in page.text and "text_order.mattr" in page.text
    assert "<b>x</b>" not in page.text and 'id="spectrum-plot"' in page.text
    summary = client.get(f"/api/corpora/{damaged}").json()
    assert summary["damaged"] == ["labels"] and summary["labels"] == {}
    richness = client.get(f"/api/corpora/{damaged}/richness").json()
    assert richness["at_corpus_size"]["mattr"] is None and "damaged" in richness["text_order_damaged"]

    for url in ("/compare", "/api/compare"):
        response = client.get(url, params={"corpus": [damaged, other]})
        assert response.status_code == 200, response.text
    warnings = client.get("/api/compare", params={"corpus": [damaged, other]}).json()["warnings"]
    assert any(w["kind"] == "damaged" and "hand-edited" in w["message"] for w in warnings)
    assert client.get("/").status_code == 200


def test_a_damaged_spectrum_row_disables_the_sections_that_need_it(client):
    damaged = _upload(client, "bad spectrum")
    other = _upload(client, "intact", TEXT.replace("alpha", "delta"))
    _damage(
        client, update(SpectrumRow).where(SpectrumRow.corpus_id == damaged, SpectrumRow.m == 1).values(vm=-3)
    )
    page = client.get(f"/corpora/{damaged}")
    assert page.status_code == 200
    for section in ("spectrum", "richness", "unseen"):
        assert f'id="damaged-{section}"' in page.text, section
    assert "spectrum counts V_m must be positive" in page.text
    response = client.get("/api/compare", params={"corpus": [damaged, other]})
    assert response.status_code == 422
    assert "bad spectrum" in response.json()["detail"] and "damaged" in response.json()["detail"]
    assert client.get("/compare", params={"corpus": [damaged, other]}).status_code == 422


def test_a_damaged_cached_curve_disables_the_growth_plots(client):
    damaged = _upload(client, "bad curve")
    _damage(
        client,
        update(CachedResult)
        .where(CachedResult.corpus_id == damaged, CachedResult.kind == "random_order_growth")
        .values(payload_json='{"points": 5}'),
    )
    page = client.get(f"/corpora/{damaged}")
    assert page.status_code == 200 and 'id="damaged-growth"' in page.text
    assert 'id="spectrum-plot"' in page.text
    other = _upload(client, "intact", TEXT.replace("alpha", "delta"))
    assert client.get("/compare", params={"corpus": [damaged, other]}).status_code == 200
    body = client.get("/api/compare", params={"corpus": [damaged, other]}).json()
    assert body["growth"][0]["random_order"]["tokens"] == [] and body["growth"][1]["random_order"]["tokens"]
    assert any(w["kind"] == "damaged" and "bad curve" in w["message"] for w in body["warnings"])
