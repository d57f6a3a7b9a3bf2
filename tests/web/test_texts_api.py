"""Texts through the API: ``text_separator`` on upload, the per-text table and growth by texts.

References: the texts cut with Python's str.split and tokenized by nltk's RegexpTokenizer (an independent
tokenizer of the default profile's words, as in test_corpus_kinds); the growth by texts against the average
over every subset of k texts (brute force).
"""

from __future__ import annotations

from collections import Counter
from itertools import combinations

import pytest

from tests.web.test_corpus_kinds import nltk_tokens, upload

TEXTS = [
    "The tide came in over the mud flats at dawn.",
    "Nets were mended in the shed while the rain fell.",
    "The keeper wrote that the lamp burned all night.",
    "Herring boats came back late; the harbour was full.",
    "Rain again, and the flats were under water by noon.",
]


def test_marker_separated_texts_are_kept_and_grow_as_brute_force_says(client):
    body = "\n###\n".join(TEXTS[:2]) + "\n###\n###\n" + "\n###\n".join(TEXTS[2:])
    response = upload(client, "text", "letters.txt", body.encode(), "letters", text_separator="###")
    assert response.status_code == 201, response.text
    cid = response.json()["id"]
    page = client.get(f"/api/corpora/{cid}/texts").json()
    assert page["available"] and page["total"] == 5 and page["empty_skipped"] == 1
    word_sets = [set(nltk_tokens(t)) for t in TEXTS]  # nltk: the reference tokens of each text
    assert [(t["name"], t["tokens"], t["types"]) for t in page["texts"]] == [
        (f"letters.txt #{i + 1}", len(nltk_tokens(t)), len(word_sets[i])) for i, t in enumerate(TEXTS)
    ]
    growth = client.get(f"/api/corpora/{cid}/texts/growth").json()
    for point in growth["interpolation"]["points"]:
        k = point["texts"]
        subsets = [len(set().union(*s)) if s else 0 for s in combinations(word_sets, k)]
        assert point["types"] == pytest.approx(sum(subsets) / len(subsets), rel=1e-9)
        assert point["low"] <= point["types"] <= point["high"]
    assert growth["extrapolation"]["points"][0]["types"] == pytest.approx(growth["types"])
    assert growth["extrapolation"]["points"][-1]["texts"] == 10  # twice the texts by default


def test_planning_in_texts_answers_with_a_range_or_says_why_not(client):
    body = "\n\n".join(TEXTS)
    cid = upload(client, "text", "a.txt", body.encode(), "paragraphs", text_separator="paragraph").json()[
        "id"
    ]
    growth = client.get(f"/api/corpora/{cid}/texts/growth").json()
    target = growth["types"] + 5
    plan = client.get(f"/api/corpora/{cid}/texts/growth", params={"types": target}).json()["plan"]
    assert growth["chao2"] > target  # mostly words of one text: many more types to come
    assert plan["not_applicable"] is None
    assert plan["more_texts_low"] <= plan["more_texts"] > 0
    assert plan["more_texts_high"] is None or plan["more_texts_high"] >= plan["more_texts"]
    far = client.get(f"/api/corpora/{cid}/texts/growth", params={"types": growth["chao2"] + 1}).json()["plan"]
    assert far["more_texts"] is None and "Chao2" in far["not_applicable"]


def test_each_file_is_a_text_and_counts_have_no_texts(client):
    files = [("files", ("a.txt", TEXTS[0].encode())), ("files", ("b.txt", TEXTS[1].encode()))]
    cid = client.post("/api/corpora?wait=1", data={"name": "two files"}, files=files).json()["id"]
    page = client.get(f"/api/corpora/{cid}/texts").json()
    assert [t["name"] for t in page["texts"]] == ["a.txt", "b.txt"] and page["separator"] == "file"
    counts = upload(client, "word-counts", "c.tsv", b"word\tcount\ntide\t3\n", "counts")
    counts_id = counts.json()["id"]
    for path in ("texts", "texts/growth"):
        answer = client.get(f"/api/corpora/{counts_id}/{path}").json()
        assert answer == {"available": False, "reason": answer["reason"]} and "no texts" in answer["reason"]


def test_a_bad_separator_is_refused_and_stores_nothing(client):
    before = len(client.get("/api/corpora").json())
    response = upload(client, "text", "a.txt", b"one two", "bad", text_separator="#" * 101)
    assert response.status_code == 422 and "text_separator" in response.json()["detail"]
    response = upload(client, "word-counts", "c.tsv", b"word\tcount\nx\t1\n", "bad", text_separator="###")
    assert response.status_code == 422 and "text_separator" in response.json()["detail"]
    assert len(client.get("/api/corpora").json()) == before


def test_a_word_count_list_with_a_text_column_has_texts(client):
    # Reference: the same texts uploaded as text; their per-text tables and growth by texts must agree.
    body = "\n###\n".join(TEXTS)
    text_id = upload(client, "text", "letters.txt", body.encode(), "as text", text_separator="###").json()[
        "id"
    ]
    rows = ["text\tword\tcount"] + [
        f"letter {i + 1}\t{word}\t{count}"
        for i, text in enumerate(TEXTS)
        for word, count in sorted(Counter(nltk_tokens(text)).items())  # nltk: independent tokens
    ]
    response = upload(client, "word-counts", "counts.tsv", "\n".join(rows).encode(), "as counts")
    assert response.status_code == 201, response.text
    counts_id = response.json()["id"]
    as_text = client.get(f"/api/corpora/{text_id}/texts").json()
    as_counts = client.get(f"/api/corpora/{counts_id}/texts").json()
    assert as_counts["separator"] == "text column"
    assert [t["name"] for t in as_counts["texts"]] == [f"letter {i + 1}" for i in range(len(TEXTS))]
    strip = [(t["tokens"], t["types"]) for t in as_text["texts"]]
    assert [(t["tokens"], t["types"]) for t in as_counts["texts"]] == strip
    growth = [client.get(f"/api/corpora/{cid}/texts/growth").json() for cid in (text_id, counts_id)]
    assert growth[0]["interpolation"] == growth[1]["interpolation"]
    assert growth[0]["incidence"] == growth[1]["incidence"]
