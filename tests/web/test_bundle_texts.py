"""A bundle carries a corpus's texts: the copy has the same texts and the same text-level answers; texts that
do not add up to the corpus are refused naming the field, and nothing is stored."""

from __future__ import annotations

import gzip
import hashlib
import json
from collections import Counter

import pytest

# Three texts of words separated by blanks: Python's str.split and collections.Counter are the reference
# word counts of each text (the default profile folds case and keeps these plain words as they are).
TEXTS = [
    "the river runs past the mill and the mill wheel turns",
    "a heron waits by the river for the fish to rise",
    "the wheel of the old mill is still",
    "fish rise at dusk and the heron takes one",
]
SEPARATOR = "###"


def upload(client, data: dict, filename: str, content: bytes):
    return client.post("/api/corpora?wait=1", data=data, files={"files": (filename, content)})


def collection(client) -> int:
    body = f"\n{SEPARATOR}\n".join(TEXTS).encode()
    response = upload(client, {"name": "mill texts", "text_separator": SEPARATOR}, "mill.txt", body)
    assert response.status_code == 201, response.text
    return response.json()["id"]


def bundle_document(client, corpus_id: int) -> dict:
    return json.loads(gzip.decompress(client.get(f"/api/corpora/{corpus_id}/bundle").content))


def encoded(document: dict) -> bytes:
    """The bundle with its checksum recomputed as the README says (SHA-256 of the canonical JSON)."""
    rest = {k: v for k, v in document.items() if k != "checksum"}
    canonical = json.dumps(rest, sort_keys=True, separators=(",", ":"), ensure_ascii=False).encode()
    document["checksum"] = {"algorithm": "sha256", "value": hashlib.sha256(canonical).hexdigest()}
    return gzip.compress(json.dumps(document).encode())


def test_a_bundle_carries_the_texts_and_the_copy_answers_the_same(client):
    original = collection(client)
    document = bundle_document(client, original)
    carried = document["corpus"]["texts"]
    assert carried["separator"] == SEPARATOR and len(carried["list"]) == len(TEXTS)
    words = [w for w, _ in document["corpus"]["counts"]]
    for text, entry in zip(TEXTS, carried["list"], strict=True):
        counted = {words[r]: c for r, c in zip(entry["ranks"], entry["counts"], strict=True)}
        assert counted == dict(Counter(text.split())) and entry["tokens"] == len(text.split())

    copy = upload(client, {"kind": "bundle", "name": "copy"}, "mill.json.gz", encoded(document))
    assert copy.status_code == 201, copy.text
    copied = copy.json()["id"]
    for path in ("texts", "words?limit=100"):
        first, second = (client.get(f"/api/corpora/{cid}/{path}").json() for cid in (original, copied))
        assert first == second, path
    assert client.get(f"/api/corpora/{copied}/texts").json()["available"] is True


def _drop_one_occurrence(document: dict) -> None:
    entry = document["corpus"]["texts"]["list"][0]
    entry["counts"][0] += 1
    entry["tokens"] += 1


def _unsorted_ranks(document: dict) -> None:
    entry = document["corpus"]["texts"]["list"][1]
    entry["ranks"][0], entry["ranks"][1] = entry["ranks"][1], entry["ranks"][0]


def _wrong_tokens(document: dict) -> None:
    document["corpus"]["texts"]["list"][2]["tokens"] += 5


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (_drop_one_occurrence, "corpus.texts.list does not add up to the corpus"),
        (_unsorted_ranks, "corpus.texts.list[1].ranks must rise strictly"),
        (_wrong_tokens, "corpus.texts.list[2].tokens is"),
        (lambda d: d["corpus"]["texts"]["list"][0].__setitem__("colour", "red"), "'colour'"),
        (lambda d: d["corpus"]["texts"].__setitem__("list", []), "corpus.texts.list must be a list of 1"),
    ],
)
def test_texts_that_do_not_add_up_are_refused_and_nothing_is_stored(client, change, message):
    original = collection(client)
    document = bundle_document(client, original)
    change(document)
    response = upload(client, {"kind": "bundle", "name": "forged"}, "f.json.gz", encoded(document))
    assert response.status_code == 422, response.text
    assert message in response.json()["detail"]
    assert [c["id"] for c in client.get("/api/corpora").json()] == [original]
