"""Corpora from counts: word-count lists, spectra and bundles through the API, against outside references.

References: nltk's RegexpTokenizer and FreqDist count the words of the standard library's docstrings
independently of our tokenizer (FreqDist.r_Nr() is their frequency spectrum); scipy.stats.hypergeom gives the
exact expected types of random samples; Python's gzip and json modules read the bundle as any program would.
"""

from __future__ import annotations

import gzip
import hashlib
import json
import unicodedata

import numpy as np
import pytest
from nltk import FreqDist
from nltk.tokenize import RegexpTokenizer
from scipy.stats import hypergeom

# Our default profile's word (README: letters with inner apostrophes or hyphens; digits dropped), as an nltk
# regular-expression tokenizer; case folding and NFC are done before, as the profile says.
WORD = r"[^\W\d_]+(?:['\u2019\-\u2010\u2011][^\W\d_]+)*"


def nltk_tokens(text: str, fold: bool = True) -> list[str]:
    text = unicodedata.normalize("NFC", text.replace("\u00ad", ""))
    return RegexpTokenizer(WORD).tokenize(text.casefold() if fold else text)


def upload(client, kind: str, filename: str, content: bytes, name: str | None = "corpus", **form):
    data = {"kind": kind, **form} | ({"name": name} if name is not None else {})
    return client.post("/api/corpora?wait=1", data=data, files={"files": (filename, content)})


def fitted_report(client, corpus_id: int) -> dict:
    response = client.get(f"/api/corpora/{corpus_id}/models")
    assert response.status_code == 200, response.text
    return response.json()


@pytest.fixture()
def text_and_counts(client, stdlib_text):
    """The docstrings uploaded as text, and as a word-count TSV made by nltk from the same text without
    case folding (the import must fold and merge "The" and "the")."""
    text_id = upload(client, "text", "docs.txt", stdlib_text.encode("utf-8"), "docs as text").json()["id"]
    unfolded = FreqDist(nltk_tokens(stdlib_text, fold=False))
    table = "word\tcount\n" + "".join(f"{w}\t{c}\n" for w, c in unfolded.items())
    response = upload(client, "word-counts", "counts.tsv", table.encode("utf-8"), "docs as counts")
    assert response.status_code == 201, response.text
    return text_id, response.json()["id"]


def test_word_counts_of_an_independent_tokenizer_give_the_texts_spectrum_and_interpolation(
    client, stdlib_text, text_and_counts
):
    text_id, counts_id = text_and_counts
    reference = FreqDist(nltk_tokens(stdlib_text))  # nltk: the reference word counts
    nltk_spectrum = sorted(reference.r_Nr().items())  # nltk: V_m for every m with V_m > 0
    nltk_spectrum = [[m, v] for m, v in nltk_spectrum if v]
    for corpus_id in (text_id, counts_id):
        body = client.get(f"/api/corpora/{corpus_id}/spectrum").json()
        assert body["spectrum"] == nltk_spectrum
        assert (body["tokens"], body["types"]) == (reference.N(), reference.B())
    summary = client.get(f"/api/corpora/{counts_id}").json()
    assert summary["source"]["kind"] == "word-counts" and not summary["source"]["text_order"]

    frequencies = np.array(list(reference.values()))
    big_n = reference.N()
    for n in (100, 5_000, big_n // 2):
        # scipy: a type with f of N tokens is missed by a sample of n with probability hypergeom.pmf(0).
        expected = float(np.sum(1 - hypergeom.pmf(0, big_n, frequencies, n)))
        got = [
            client.get(f"/api/corpora/{cid}/predict", params={"tokens": n, "model": "sample"}).json()["types"]
            for cid in (text_id, counts_id)
        ]
        assert got[0] == got[1]
        assert got[0] == pytest.approx(expected, rel=1e-9)


def test_a_spectrum_file_gives_the_same_models_and_predictions(client, stdlib_text, text_and_counts):
    text_id, counts_id = text_and_counts
    reference = FreqDist(nltk_tokens(stdlib_text))
    rows = "".join(f"{m},{v}\n" for m, v in sorted(reference.r_Nr().items()) if v)
    table = f"# tokens: {reference.N()}\n# types: {reference.B()}\nfrequency,types\n{rows}"
    response = upload(client, "spectrum", "spectrum.csv", table.encode("utf-8"), "docs as spectrum")
    assert response.status_code == 201, response.text
    spectrum_id = response.json()["id"]

    text_report, counts_report, spectrum_report = (
        fitted_report(client, cid) for cid in (text_id, counts_id, spectrum_id)
    )
    assert set(spectrum_report["fitted"]) == set(text_report["fitted"])
    for name, fitted in spectrum_report["fitted"].items():
        assert fitted["params"] == text_report["fitted"][name]["params"]
    # Neither counts nor a spectrum have a text order: same backtests, so the same recommended ensemble.
    assert spectrum_report["recommended"] == counts_report["recommended"]
    tokens = 10 * reference.N()
    for model in (*spectrum_report["fitted"], "recommended"):
        got = client.get(
            f"/api/corpora/{spectrum_id}/predict", params={"tokens": tokens, "model": model}
        ).json()
        source = counts_id if model == "recommended" else text_id
        want = client.get(f"/api/corpora/{source}/predict", params={"tokens": tokens, "model": model}).json()
        assert got["types"] == want["types"] and got["legomena"] == want["legomena"], model
    plan = client.get(f"/api/corpora/{spectrum_id}/plan", params={"coverage": 0.9}).json()
    assert plan == client.get(f"/api/corpora/{counts_id}/plan", params={"coverage": 0.9}).json()
    richness = client.get(f"/api/corpora/{spectrum_id}/richness").json()["at_corpus_size"]
    assert richness["mattr"] is None and richness["yule_k"] == pytest.approx(
        # Yule (1944): K = 10^4 (sum m^2 V_m - N) / N^2, from nltk's spectrum
        1e4 * (sum(m * m * v for m, v in reference.r_Nr().items()) - reference.N()) / reference.N() ** 2
    )


def test_a_spectrum_corpus_says_what_it_cannot_give(client, text_and_counts):
    text_id, _ = text_and_counts
    spectrum_id = upload(
        client, "spectrum", "s.tsv", b"1\t30\n2\t9\n3\t4\n7\t2\n40\t1\n", "spectrum only"
    ).json()["id"]
    words = client.get(f"/api/corpora/{spectrum_id}/words", params={"search": "the"}).json()
    assert words["available"] is False and "no word list" in words["note"]
    assert client.get(f"/api/corpora/{spectrum_id}/words.csv").status_code == 409
    growth = client.get(f"/api/corpora/{spectrum_id}/growth").json()
    assert growth["text_order"] == [] and growth["random_order"]["points"] and "text_order_note" in growth
    page = client.get(f"/corpora/{spectrum_id}")
    assert page.status_code == 200 and "a frequency spectrum" in page.text and "no word list" in page.text
    comparison = client.get("/api/compare", params={"corpus": [text_id, spectrum_id]})
    assert comparison.status_code == 200, comparison.text
    body = comparison.json()
    assert any(w["kind"] == "sources" for w in body["warnings"])
    assert "no distinctive words" in body["distinctive"]["note"]


def _bundle_json(client, corpus_id: int) -> dict:
    response = client.get(f"/api/corpora/{corpus_id}/bundle")
    assert response.status_code == 200 and response.headers["content-type"] == "application/gzip"
    return json.loads(gzip.decompress(response.content))  # Python's gzip and json: any reader can open it


def test_bundles_round_trip_to_identical_numbers(client, stdlib_text):
    text_id = upload(
        client, "text", "docs.txt", stdlib_text.encode("utf-8"), "docs", labels="author=stdlib"
    ).json()["id"]
    bundle = client.get(f"/api/corpora/{text_id}/bundle").content
    document = json.loads(gzip.decompress(bundle))
    # The checksum is SHA-256 over the canonical JSON of every other field (README), checked with hashlib.
    rest = {k: v for k, v in document.items() if k != "checksum"}
    canonical = json.dumps(rest, sort_keys=True, separators=(",", ":"), ensure_ascii=False).encode()
    assert document["checksum"] == {"algorithm": "sha256", "value": hashlib.sha256(canonical).hexdigest()}
    assert document["format_version"] == 2 and document["corpus"]["source_kind"] == "text"

    copy = upload(client, "bundle", "docs.json.gz", bundle, name=None)
    assert copy.status_code == 201, copy.text
    copy_id = copy.json()["id"]
    original, recreated = (client.get(f"/api/corpora/{cid}").json() for cid in (text_id, copy_id))
    for key in ("name", "tokens", "types", "hapaxes", "labels", "profile", "program_version"):
        assert recreated[key] == original[key], key
    # The text is not in a bundle, so the SHA-256 of the text it claims cannot be checked: the copy is known
    # by the hash of the numbers it carries instead (the same for every copy of the same numbers).
    assert recreated["content_hash"] != original["content_hash"]
    assert recreated["source"]["kind"] == "bundle" and recreated["source"]["data"] == "text"
    assert recreated["source"]["origin"]["name"] == "docs" and recreated["source"]["unavailable"] == []
    for path in ("spectrum", "growth", "richness", "unseen", "words?limit=10000"):
        a, b = (client.get(f"/api/corpora/{cid}/{path}").json() for cid in (text_id, copy_id))
        if path == "spectrum":  # the same numbers, each with its own download address
            a, b = ({k: v for k, v in body.items() if k != "download"} for body in (a, b))
        assert a == b, path
    first, second = (fitted_report(client, cid) for cid in (text_id, copy_id))
    assert first == second  # text-order backtests included: the prefix spectra came along

    # A bundle of the copy (plain JSON this time) carries the same corpus again.
    plain = client.get(f"/api/corpora/{copy_id}/bundle", params={"compress": 0})
    assert plain.headers["content-type"] == "application/json"
    ignored = {"origin": None, "created_at": None, "content_hash": None}
    assert json.loads(plain.content)["corpus"] | ignored == document["corpus"] | ignored
    third = upload(client, "bundle", "again.json", plain.content, "third copy")
    assert third.status_code == 201 and third.json()["tokens"] == original["tokens"]
    assert third.json()["content_hash"] == recreated["content_hash"]
    assert third.json()["source"]["origin"]["origin"]["name"] == "docs"


def _tampered(client, corpus_id: int, change, fix_checksum: bool) -> bytes:
    document = _bundle_json(client, corpus_id)
    change(document)
    if fix_checksum:
        rest = {k: v for k, v in document.items() if k != "checksum"}
        canonical = json.dumps(rest, sort_keys=True, separators=(",", ":"), ensure_ascii=False).encode()
        document["checksum"]["value"] = hashlib.sha256(canonical).hexdigest()
    return gzip.compress(json.dumps(document).encode())


def _set_count(document: dict) -> None:
    document["corpus"]["counts"][0][1] += 1


def _future(document: dict) -> None:
    document["format_version"] = 3


def _tokens(document: dict) -> None:
    document["corpus"]["tokens"] += 1


BAD_FILES = [
    ("word-counts", b"the,3\ncat;x\n", "line 2"),
    ("word-counts", b"word,count\nthe,3\ncat,-2\n", "line 3: the count '-2' is negative"),
    ("word-counts", b"the\t3\ncat\t2.5\n", "line 2: the count '2.5' is not a whole number"),
    ("word-counts", b"the,0\n", "line 1: the count 0 is outside"),
    ("word-counts", b"the,3,extra\n", "expected two columns"),
    ("spectrum", b"# tokens: 100\n1,10\n2,5\n", "declared 100 tokens disagree"),
    ("spectrum", b"# types: 3\n1,10\n2,5\n", "declared 3 types disagree"),
    ("spectrum", b"1,10\n2,1.5\n", "line 2"),
    ("spectrum", b"1,10\n1,5\n", "frequency 1 given twice"),
    ("spectrum", b"1,10\n10000000,20000\n", "more than the 100,000,000,000"),
    ("spectrum", b"1,10\n99999999999999999,1\n", "outside 1 .. 10,000,000"),
    ("spectrum", b"1,0\n", "no types"),
    ("bundle", b"not json at all", "not a corpus bundle"),
    ("bundle", b"\x1f\x8b\x08\x00 cut", "gzip"),
]


@pytest.mark.parametrize(("kind", "content", "message"), BAD_FILES)
def test_bad_files_get_a_clear_message_and_nothing_is_stored(client, kind, content, message):
    response = upload(client, kind, "bad.csv", content, "bad")
    assert response.status_code == 422
    assert message in response.json()["detail"]
    assert client.get("/api/corpora").json() == []


@pytest.mark.parametrize(
    ("change", "fix_checksum", "message"),
    [
        (_set_count, False, "checksum does not match"),
        (_future, True, "format version 3, made by a newer Lexigrowth"),
        (_set_count, True, "corpus.counts disagree with corpus.spectrum"),
        (_tokens, True, "declared"),
    ],
)
def test_bad_bundles_are_refused_and_nothing_is_stored(client, change, fix_checksum, message):
    source_id = upload(client, "word-counts", "c.csv", b"alpha,3\nbeta,1\ngamma,1\n", "source").json()["id"]
    response = upload(client, "bundle", "b.json.gz", _tampered(client, source_id, change, fix_checksum), None)
    assert response.status_code == 422
    assert message in response.json()["detail"]
    assert [c["id"] for c in client.get("/api/corpora").json()] == [source_id]


def test_unknown_kind_and_missing_name_are_refused(client):
    assert upload(client, "pictures", "a.csv", b"the,1\n").status_code == 422
    response = upload(client, "word-counts", "a.csv", b"the,1\n", name=None)
    assert response.status_code == 422 and "name" in response.json()["detail"]


# ---------------------------------------------------------------------------------------- forged bundles
# A forger can recompute the SHA-256 checksum (README: it guards against damage, not forgery), so every field
# is checked for itself. Each forgery below was once stored with 201 (a review of the code and a probe).


def _stored_rows(client) -> dict[str, int]:
    """Rows of every table a corpus writes to, counted with SQLAlchemy's own count()."""
    from sqlalchemy import func, select
    from sqlmodel import Session

    from app.store.tables import CachedResult, Corpus, GrowthPoint, PrefixSpectrumRow, SpectrumRow, WordCount

    with Session(client.app.state.engine) as session:
        return {
            table.__name__: session.execute(select(func.count()).select_from(table)).scalar_one()
            for table in (Corpus, WordCount, SpectrumRow, GrowthPoint, PrefixSpectrumRow, CachedResult)
        }


def _labels(count: int, value: str = "x"):
    return lambda d: d["corpus"].__setitem__("labels", {f"k{i}": value for i in range(count)})


def _set(path: str, value):
    def change(document: dict) -> None:
        *parents, last = path.split(".")
        target = document
        for key in parents:
            target = target[key]
        target[last] = value

    return change


def _word(word: str):
    """Replace the first word of the counts, keeping the code-point order of the words."""

    def change(document: dict) -> None:
        counts = document["corpus"]["counts"]
        counts[0][0] = word
        counts.sort(key=lambda row: row[0])

    return change


def _growth_jump(document: dict) -> None:
    growth = document["corpus"]["growth"]
    growth[0] = [1, 50]  # 50 types after one token


TEXT_FORGERIES = [
    (_labels(5_000), "corpus.labels: labels: at most 50 labels"),
    (_labels(1, "v" * 200_000), "at most 500 characters"),
    (_set("corpus.labels", {"a\x00b": "x"}), "U+0000"),
    (_set("corpus.labels", {"status": "embargo\u202edelbuP"}), "U+202E"),
    (_word(""), "corpus.counts["),
    (_word("w" * 50_000), "longer than 100 characters"),
    (_word("esc\x1bape"), "corpus.counts["),
    (_growth_jump, "corpus.growth[0]"),
    (
        _set("corpus.prefix_spectra.junk", {"tokens": 1, "spectrum": [[1, 1]]}),
        "corpus.prefix_spectra['junk']",
    ),
    (_set("corpus.text_order", {"mattr": "<b>x</b>"}), "corpus.text_order.mattr"),
    (_set("corpus.sources", [f"part-{i}.txt" for i in range(10_000)]), "corpus.sources"),
    (_set("corpus.sources", ["a\x1b[31m.txt"]), "corpus.sources[0]"),
    (_set("corpus.profile", {"name": "x", "case_fold": "yes"}), "corpus.profile"),
    (_set("corpus.name", "n" * 5_000), "corpus.name"),
    (_set("corpus.extra", 1), "unknown field corpus.'extra'"),
    (_set("corpus.tokens", 1.5), "corpus.tokens"),
    (_set("corpus.hapaxes", 0), "corpus.hapaxes"),
    (_set("corpus.program_version", "1\x00"), "corpus.program_version"),
    (_set("corpus.origin", {"name": "x", "secret": "y"}), "unknown field corpus.origin.'secret'"),
    (_set("corpus.content_hash", "not a hash"), "corpus.content_hash"),
]


@pytest.mark.parametrize(("change", "message"), TEXT_FORGERIES)
def test_forged_text_bundles_are_refused_naming_the_field_and_store_nothing(
    client, stdlib_text, change, message
):
    source_id = upload(client, "text", "docs.txt", stdlib_text[:4_000].encode(), "docs").json()["id"]
    before = _stored_rows(client)
    response = upload(client, "bundle", "b.json.gz", _tampered(client, source_id, change, True), None)
    assert response.status_code == 422, response.text
    assert message in response.json()["detail"]
    assert _stored_rows(client) == before
    assert [c["id"] for c in client.get("/api/corpora").json()] == [source_id]


def test_forged_counts_bundles_are_refused(client):
    source_id = upload(client, "word-counts", "c.csv", b"alpha,3\nbeta,1\ngamma,1\n", "source").json()["id"]
    before = _stored_rows(client)
    forgeries = [
        (_set("corpus.content_hash", "0" * 64), "corpus.content_hash does not match the word-counts"),
        (_set("corpus.growth", [[5, 3]]), "corpus.growth must be null"),
        (_set("corpus.counts", [["alpha", 3], ["beta", 1], ["gamma", 1], ["gamma", 1]]), "code-point order"),
        (_set("corpus.spectrum", [[1, 2], [20_000_000, 1]]), "corpus.spectrum"),
    ]
    for change, message in forgeries:
        response = upload(client, "bundle", "b.json.gz", _tampered(client, source_id, change, True), None)
        assert response.status_code == 422 and message in response.json()["detail"], (message, response.text)
    assert _stored_rows(client) == before


def test_a_text_bundles_made_up_content_hash_is_not_kept(client, stdlib_text):
    """The text is not in a bundle, so its SHA-256 cannot be checked: the copy is known by its numbers."""
    source_id = upload(client, "text", "docs.txt", stdlib_text[:4_000].encode(), "docs").json()["id"]
    made_up = "ab" * 32
    bundle = _tampered(client, source_id, _set("corpus.content_hash", made_up), True)
    copy = upload(client, "bundle", "b.json.gz", bundle, None)
    assert copy.status_code == 201, copy.text
    honest = upload(
        client, "bundle", "c.json.gz", client.get(f"/api/corpora/{source_id}/bundle").content, None
    )
    assert copy.json()["content_hash"] != made_up
    assert copy.json()["content_hash"] == honest.json()["content_hash"]
