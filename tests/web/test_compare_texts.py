"""Text-level statistics of a comparison through the API: corpora of `###`-separated texts.

References: each text's tokens from nltk's RegexpTokenizer (``nltk_tokens``, independent of the ingestion
pipeline); per-text expected types from scipy.stats.hypergeom (E[V(m)] = sum over types of
1 - P(0 occurrences in m draws)); Welch's test from scipy.stats.ttest_ind(equal_var=False); dispersion and
keyness from the maths core on a matrix built here from those tokens.
"""

from __future__ import annotations

from collections import Counter

import numpy as np
import pytest
import scipy.sparse as sp
from scipy import stats
from statsmodels.stats.multitest import multipletests

from app.core.text_keyness import text_keyness
from app.core.text_tests import pairwise_text_comparisons
from app.services.comparisons import without_word_lists
from app.services.text_comparisons import MIN_TEXT_SIZE, SEED
from tests.web.test_corpus_kinds import nltk_tokens, upload


def paragraphs(text: str, smallest: int, count: int, skip: int = 0) -> list[str]:
    """``count`` docstring paragraphs of at least ``smallest`` tokens, after skipping ``skip`` of them."""
    found = [
        p for p in dict.fromkeys(text.split("\n\n")) if len(nltk_tokens(p)) >= smallest and "###" not in p
    ]
    return found[skip : skip + count]


def matrices(corpora: list[list[str]]) -> tuple[list[sp.csr_matrix], list[str]]:
    """Texts x words counts of each corpus over the union of their words, from nltk's tokens."""
    counts = [[Counter(nltk_tokens(t)) for t in texts] for texts in corpora]
    words = sorted(set().union(*(c for texts in counts for c in texts)))
    column = {w: j for j, w in enumerate(words)}
    out = []
    for texts in counts:
        dense = np.zeros((len(texts), len(words)), dtype=np.int64)
        for i, c in enumerate(texts):
            for w, n in c.items():
                dense[i, column[w]] = n
        out.append(sp.csr_matrix(dense))
    return out, words


def hypergeometric_types(tokens: list[str], m: int) -> float:
    counts = Counter(tokens)
    n = len(tokens)
    return sum(1 - stats.hypergeom.pmf(0, n, f, m) for f in counts.values())  # scipy.stats reference


@pytest.fixture()
def two_collections(client, stdlib_text):
    texts_a = paragraphs(stdlib_text, 60, 8)
    texts_b = paragraphs(stdlib_text, 60, 7, skip=8)
    ids = [
        upload(client, "text", f"{name}.txt", "\n###\n".join(t).encode(), name, text_separator="###").json()[
            "id"
        ]
        for name, t in (("first", texts_a), ("second", texts_b))
    ]
    return ids, [texts_a, texts_b]


def test_text_tests_of_a_pair_equal_the_core_and_scipy(client, two_collections):
    ids, corpora = two_collections
    answer = client.get("/api/compare", params={"corpus": ids}).json()
    level = answer["size_matched"]["text_level"]
    shortest = min(len(nltk_tokens(t)) for texts in corpora for t in texts)
    assert level["available"] and level["text_size"] == max(MIN_TEXT_SIZE, shortest)
    m = level["text_size"]
    [pair] = answer["size_matched"]["text_tests"]
    assert (pair["first"], pair["second"]) == tuple(ids)
    per_text = [[hypergeometric_types(nltk_tokens(t), m) for t in texts] for texts in corpora]
    for row, values in zip(level["rows"], per_text, strict=True):
        assert row["tested"] == len(values) and row["too_short"] == 0
        assert row["mean"] == pytest.approx(np.mean(values), rel=1e-9)
        assert row["sd"] == pytest.approx(np.std(values, ddof=1), rel=1e-9)
    welch = stats.ttest_ind(per_text[0], per_text[1], equal_var=False)  # scipy.stats reference
    assert pair["tests"]["welch"]["p"] == pytest.approx(welch.pvalue, rel=1e-6)
    assert pair["difference"] == pytest.approx(np.mean(per_text[0]) - np.mean(per_text[1]), rel=1e-9)
    # the same stored texts through the core, with the service's seed: the same numbers
    counts, _ = matrices(corpora)
    pooled_size = level["pooled_size"]
    assert pooled_size <= min(sum(len(nltk_tokens(t)) for t in texts) for texts in corpora)
    [core] = pairwise_text_comparisons(counts, ["a", "b"], m, pooled_size, np.random.default_rng(SEED))
    assert pair["p"] == pytest.approx(core.comparison.permutation.p, rel=1e-12)
    assert pair["tests"]["pooled"]["p"] == pytest.approx(core.comparison.pooled.p, rel=1e-12)
    assert pair["tests"]["pooled"]["difference"] == pytest.approx(core.comparison.pooled.difference, rel=1e-9)
    assert pair["effect"]["g"] == pytest.approx(core.comparison.effect.g, rel=1e-9)
    assert pair["effect"]["low"] < pair["effect"]["g"] < pair["effect"]["high"]
    assert 0 < pair["p_holm"] <= 1 and pair["p_holm"] == pytest.approx(pair["p"])  # one pair: Holm is p
    page = client.get("/compare", params={"corpus": ids}).text
    assert "do the texts of one corpus have a richer vocabulary" in page
    assert page.index('id="text-tests"') < page.index('id="tests-table"')  # the text-level tests lead


def test_short_texts_are_listed_and_left_out(client, stdlib_text):
    long_texts = paragraphs(stdlib_text, 60, 4)
    short = "Short text of a few words only."
    first = upload(
        client, "text", "a.txt", "\n###\n".join([*long_texts[:2], short]).encode(), "a", text_separator="###"
    ).json()["id"]
    second = upload(
        client, "text", "b.txt", "\n###\n".join(long_texts[2:]).encode(), "b", text_separator="###"
    ).json()["id"]
    level = client.get("/api/compare", params={"corpus": [first, second]}).json()["size_matched"][
        "text_level"
    ]
    assert level["available"], level["reason"]
    assert level["text_size"] == MIN_TEXT_SIZE  # the shortest text is below the floor
    row = level["rows"][0]
    assert row["tested"] == 2 and row["too_short"] == 1
    assert row["too_short_texts"] == [{"position": 3, "name": "a.txt #3", "tokens": len(nltk_tokens(short))}]


def test_a_corpus_without_texts_falls_back_to_token_tests_with_a_warning(client, two_collections):
    ids, _ = two_collections
    counts = upload(client, "word-counts", "c.tsv", b"word\tcount\ntide\t30\nnet\t20\nthe\t50\n", "counts")
    answer = client.get("/api/compare", params={"corpus": [ids[0], counts.json()["id"]]}).json()
    assert answer["size_matched"]["text_tests"] == []
    assert answer["size_matched"]["text_level"]["without_texts"] == [counts.json()["id"]]
    assert len(answer["size_matched"]["tests"]) == 1  # the token-level test is still there
    [warning] = [w for w in answer["warnings"] if w["kind"] == "texts"]
    assert "counts has no texts" in warning["message"] and "token-level tests only" in warning["message"]
    page = client.get("/compare", params={"corpus": [ids[0], counts.json()["id"]]}).text
    assert "token-level tests only" in page


def test_word_list_dispersion_follows_the_published_formulas(client, two_collections):
    ids, corpora = two_collections
    answer = client.get(f"/api/corpora/{ids[0]}/words", params={"limit": 10_000}).json()
    texts = [Counter(nltk_tokens(t)) for t in corpora[0]]
    lengths = np.array([sum(c.values()) for c in texts], dtype=float)
    shares = lengths / lengths.sum()
    assert answer["texts"] == len(texts) and "Gries" in answer["dispersion"]
    assert len(answer["words"]) == answer["total"] == len(set().union(*texts))
    for entry in answer["words"]:
        x = np.array([c[entry["word"]] for c in texts], dtype=float)
        # Gries (2008): DP = 1/2 sum |v_i - s_i|; Juilland's D = 1 - sd / mean / sqrt(n - 1) over the texts'
        # relative frequencies (published formulas, computed here word by word)
        assert entry["in_texts"] == np.count_nonzero(x)
        assert entry["dp"] == pytest.approx(0.5 * np.abs(x / x.sum() - shares).sum(), abs=1e-12)
        rates = x / lengths
        juilland = 1 - rates.std() / rates.mean() / np.sqrt(len(texts) - 1)
        assert entry["juilland_d"] == pytest.approx(juilland, abs=1e-9)
    page = client.get(f"/corpora/{ids[0]}").text
    assert "Juilland's D" in page and 'data-field="dp"' in page
    counts = upload(client, "word-counts", "c.tsv", b"word\tcount\ntide\t30\n", "counts").json()["id"]
    plain = client.get(f"/api/corpora/{counts}/words").json()
    assert "texts" not in plain and plain["words"] == [{"word": "tide", "count": 30}]
    assert "Juilland's D" not in client.get(f"/corpora/{counts}").text


def test_distinctive_words_across_texts_equal_scipy_and_the_core(client, two_collections):
    ids, corpora = two_collections
    answer = client.get("/api/compare", params={"corpus": ids, "min_freq": 3}).json()
    keyness, distinctive = answer["distinctive_texts"], answer["distinctive"]
    assert keyness["available"] and [w["word"] for w in keyness["words"]] == [
        w["word"] for w in distinctive["words"]
    ]
    assert (keyness["texts_first"], keyness["texts_second"]) == (len(corpora[0]), len(corpora[1]))
    (first, second), words = matrices(corpora)
    core = text_keyness(first, second)
    totals = np.asarray(first.sum(axis=0)).ravel() + np.asarray(second.sum(axis=0)).ravel()
    tested = np.flatnonzero(totals >= 3)
    assert keyness["tested"] == distinctive["tested"] == tested.size
    holm = dict(zip(tested, multipletests(core.p_mann_whitney[tested], method="holm")[1], strict=True))
    column = {w: j for j, w in enumerate(words)}
    rates = [first.toarray() / first.sum(axis=1), second.toarray() / second.sum(axis=1)]
    for entry, plain in zip(keyness["words"], distinctive["words"], strict=True):
        j = column[entry["word"]]
        assert (entry["g2"], entry["log_ratio"]) == (plain["g2"], plain["log_ratio"])
        assert entry["in_texts_first"] == np.count_nonzero(first[:, [j]].toarray())
        assert entry["in_texts_second"] == np.count_nonzero(second[:, [j]].toarray())
        reference = stats.mannwhitneyu(rates[0][:, j], rates[1][:, j], method="asymptotic")  # scipy reference
        assert entry["p_mann_whitney"] == pytest.approx(reference.pvalue, rel=1e-9)
        assert entry["p_mann_whitney_holm"] == pytest.approx(holm[j], rel=1e-9)  # statsmodels reference
        assert entry["per_million_first"] == pytest.approx(1e6 * first[:, [j]].sum() / first.sum(), rel=1e-12)
    page = client.get("/compare", params={"corpus": ids, "min_freq": 3}).text
    assert 'id="keyness-table"' in page and "Mann-Whitney p (Holm)" in page
    public = without_word_lists(answer)["distinctive_texts"]  # a visitor of a public permalink: no words
    assert public["words"] == [] and public["words_hidden"] and public["tested"] == keyness["tested"]


def test_distinctive_words_across_texts_need_texts_on_both_sides(client, two_collections):
    ids, _ = two_collections
    counts = upload(client, "word-counts", "c.tsv", b"word\tcount\nthe\t30\nnet\t20\n", "counts").json()["id"]
    answer = client.get("/api/compare", params={"corpus": [ids[0], counts]}).json()
    assert answer["distinctive_texts"]["available"] is False
    assert "counts has fewer than two texts" in answer["distinctive_texts"]["reason"]
    assert answer["distinctive"]["words"]  # G² is still there


def test_too_few_long_texts_or_too_large_corpora_say_why(client, two_collections, stdlib_text, monkeypatch):
    ids, _ = two_collections
    one_long = "\n###\n".join([paragraphs(stdlib_text, 60, 1)[0], "A short text.", "Another short one."])
    short = upload(client, "text", "s.txt", one_long.encode(), "short", text_separator="###").json()["id"]
    answer = client.get("/api/compare", params={"corpus": [ids[0], short]}).json()
    assert answer["size_matched"]["text_tests"] == [] and answer["size_matched"]["tests"]
    [warning] = [w for w in answer["warnings"] if w["kind"] == "texts"]
    assert f"has 1 text of {MIN_TEXT_SIZE} tokens or more (3 in all)" in warning["message"]
    monkeypatch.setattr("app.services.text_comparisons.TEXT_TESTS_MAX_SECONDS", 0.1)
    level = client.get("/api/compare", params={"corpus": ids}).json()["size_matched"]["text_level"]
    assert not level["available"] and "not computed in a page for this comparison" in level["reason"]
    assert "not computed in a page" in client.get("/compare", params={"corpus": ids}).text
