"""The comparison service against outside references: scipy.stats.hypergeom for the size-matched
expectations, lexicalrichness for HD-D and MTLD, Yule's (1944) formula on raw counts, scipy.stats.norm and
statsmodels' Holm correction for the pairwise tests, scipy.stats.chi2_contingency for Dunning's G^2, random
samples drawn with numpy for the random-order spread, and direct counts on the token sequence.

The corpora are stretches of real English (standard-library docstrings, collected at test time), reduced to
lower-case ASCII words separated by spaces, so that the default tokenization profile yields exactly these
tokens.
"""

from __future__ import annotations

import math
import re
from collections import Counter

import numpy as np
import pytest
from lexicalrichness import LexicalRichness
from scipy.stats import chi2_contingency, hypergeom, norm
from statsmodels.stats.multitest import multipletests

from app.core.interpolation import expected_types
from app.ingest.profiles import BUILTIN_PROFILES
from app.ingest.readers import TextSource
from app.services import comparisons as service
from app.services import ingestion, modelling
from app.store import corpora as store
from app.store.corpora import CorpusNotFoundError
from app.store.db import make_engine
from tests.conftest import stdlib_docstrings

# three stretches of different length: 5,000, 12,000 and 20,000 tokens
STRETCHES = {"short": (0, 5_000), "middle": (5_000, 17_000), "long": (17_000, 37_000)}


def words() -> list[str]:
    return re.findall(r"[a-z]+", stdlib_docstrings().lower())


@pytest.fixture(scope="module")
def tokens() -> dict[str, list[str]]:
    all_words = words()
    assert len(all_words) >= 37_000
    return {name: all_words[a:b] for name, (a, b) in STRETCHES.items()}


def ingest(engine, *args, **kwargs) -> int:
    """Store a corpus and fit its models, as the ingest and model tasks do one after the other."""
    corpus_id = ingestion.ingest(engine, *args, **kwargs)
    modelling.compute_model_report(engine, corpus_id)
    return corpus_id


@pytest.fixture(scope="module")
def library(tmp_path_factory, tokens):
    """An engine with the three stretches as corpora; returns (engine, {name: id})."""
    engine = make_engine(f"sqlite:///{tmp_path_factory.mktemp('store') / 'store.sqlite3'}")
    ids = {
        name: ingest(engine, [TextSource.from_text(name, " ".join(toks))], name, {"part": name})
        for name, toks in tokens.items()
    }
    yield engine, ids
    engine.dispose()


def hypergeom_mean(counts: Counter, n: int, k: int | None = None) -> float:
    """E[V(n)] (k None) or E[V_k(n)] of a random sample of n tokens: type by type, the chance that a type of
    frequency f is missed (pmf at 0) or seen k times, from scipy.stats.hypergeom (Baayen 2001, Word Frequency Distributions, ch. 2)."""
    f = np.array(list(counts.values()))
    total = int(f.sum())
    if k is None:
        return float(np.sum(1 - hypergeom.pmf(0, total, f, n)))
    return float(np.sum(hypergeom.pmf(k, total, f, n)))


def rows_by_id(snapshot: dict) -> dict[int, dict]:
    return {r["corpus_id"]: r for r in snapshot["size_matched"]["rows"]}


def test_size_matched_values_equal_the_hypergeometric_expectations(library, tokens):
    engine, ids = library
    snapshot = service.live_comparison(engine, service.check_settings(list(ids.values())))
    n0 = snapshot["size_matched"]["tokens"]
    assert n0 == len(tokens["short"])  # default: the smallest corpus
    rows = rows_by_id(snapshot)
    for name, cid in ids.items():
        row, counts = rows[cid], Counter(tokens[name])
        assert row["basis"] == "interpolated"
        # reference: scipy.stats.hypergeom, type by type
        assert row["types"] == pytest.approx(hypergeom_mean(counts, n0), rel=1e-9)
        assert row["hapaxes"] == pytest.approx(hypergeom_mean(counts, n0, 1), rel=1e-8)
        assert row["dis_legomena"] == pytest.approx(hypergeom_mean(counts, n0, 2), rel=1e-8)
        assert row["ttr"] == pytest.approx(row["types"] / n0, rel=1e-12)
        # the same number as the modelling service's interpolation
        spectrum = modelling.load_spectrum(engine, cid)
        assert row["types"] == pytest.approx(expected_types(spectrum, n0), rel=1e-12)
        assert row["types"] == pytest.approx(modelling.predict(engine, cid, n0, "sample")["types"], rel=1e-12)
        # the legomena profile at n0 is the same interpolation, divided by E[V(n0)]
        predicted = next(p for p in snapshot["legomena"]["rows"] if p["corpus_id"] == cid)["predicted"]
        assert predicted[0] == pytest.approx(hypergeom_mean(counts, n0, 1) / row["types"], rel=1e-8)
        observed = next(p for p in snapshot["legomena"]["rows"] if p["corpus_id"] == cid)["observed"]
        spectrum_counts = Counter(counts.values())
        assert observed[2] == pytest.approx(spectrum_counts[3] / len(counts), rel=1e-12)


def test_size_independent_indices_match_lexicalrichness_and_yules_formula(library, tokens):
    engine, ids = library
    rows = rows_by_id(service.live_comparison(engine, service.check_settings(list(ids.values()))))
    for name, cid in ids.items():
        reference = LexicalRichness(tokens[name], preprocessor=None, tokenizer=None)
        # reference: lexicalrichness 0.5 (HD-D with 42 draws, MTLD with threshold 0.72)
        assert rows[cid]["hd_d"] == pytest.approx(reference.hdd(draws=42), rel=1e-9)
        assert rows[cid]["mtld"] == pytest.approx(reference.mtld(threshold=0.72), rel=1e-9)
        # Yule (1944): K = 10^4 (sum_i f_i^2 - N) / N^2 on the raw counts
        f = np.array(list(Counter(tokens[name]).values()), dtype=float)
        assert rows[cid]["yule_k"] == pytest.approx(1e4 * (np.sum(f**2) - f.sum()) / f.sum() ** 2, rel=1e-12)


def test_pairwise_tests_follow_the_z_formula_and_holms_method(library):
    engine, ids = library
    snapshot = service.live_comparison(engine, service.check_settings(list(ids.values()), common_size=4000))
    rows = rows_by_id(snapshot)
    tests = snapshot["size_matched"]["tests"]
    assert len(tests) == 3 and not snapshot["size_matched"]["untested"]
    for t in tests:
        a, b = rows[t["first"]], rows[t["second"]]
        z = (a["types"] - b["types"]) / math.sqrt(a["types_sd"] ** 2 + b["types_sd"] ** 2)
        assert t["z"] == pytest.approx(z, rel=1e-12)
        assert t["p"] == pytest.approx(2 * norm.sf(abs(z)), rel=1e-9, abs=1e-300)  # two-sided normal p
    # reference: statsmodels' Holm (1979) step-down adjustment over the three pairs
    holm = multipletests([t["p"] for t in tests], method="holm")[1]
    assert [t["p_holm"] for t in tests] == pytest.approx(list(holm), rel=1e-12, abs=1e-300)
    for row in rows.values():
        # the spread used by the tests is positive below the corpus size (app.core.comparison)
        assert row["types_sd"] > 0 and row["types_low"] < row["types"] < row["types_high"]


def test_sizes_beyond_a_corpus_are_model_based_and_marked(library, tokens):
    engine, ids = library
    n0 = 10_000  # above the short corpus (5,000 tokens), below the two others
    snapshot = service.live_comparison(engine, service.check_settings(list(ids.values()), common_size=n0))
    rows = rows_by_id(snapshot)
    short = rows[ids["short"]]
    assert short["basis"] == "model-based" and short["types_sd"] is None, short["method"]
    assert short["types"] == pytest.approx(modelling.predict(engine, ids["short"], n0)["types"], rel=1e-12)
    assert short["types_low"] < short["types"] < short["types_high"]
    assert short["extrapolation_factor"] == pytest.approx(2.0)
    assert rows[ids["long"]]["types"] == pytest.approx(hypergeom_mean(Counter(tokens["long"]), n0), rel=1e-9)
    assert any(w["kind"] == "extrapolated" and "short" in w["message"] for w in snapshot["warnings"])
    assert {(u["first"], u["second"]) for u in snapshot["size_matched"]["untested"]} == {
        (ids["short"], ids["middle"]),
        (ids["short"], ids["long"]),
    }
    assert len(snapshot["size_matched"]["tests"]) == 1


def test_random_order_spread_matches_random_samples_and_text_order_matches_segments(library, tokens):
    engine, ids = library
    snapshot = service.live_comparison(engine, service.check_settings(list(ids.values())))
    spread = snapshot["spread"]
    size = spread["tokens"]
    assert size == len(tokens["short"]) // service.SPREAD_MIN_SEGMENTS  # ten stretches of the short corpus
    assert "Random order" in spread["note"] and "Text order" in spread["note"]
    rng = np.random.default_rng(20240611)
    for name, cid in ids.items():
        row = next(r for r in spread["rows"] if r["corpus_id"] == cid)
        _, inverse = np.unique(tokens[name], return_inverse=True)
        # reference: 2,000 random samples of `size` tokens without replacement, drawn with numpy
        counts = [np.unique(rng.choice(inverse, size, replace=False)).size for _ in range(2000)]
        assert row["random_types"] == pytest.approx(np.mean(counts), rel=0.005)
        assert row["random_sd"] == pytest.approx(np.std(counts, ddof=1), rel=0.1)
        # reference: the type count of each consecutive stretch of `size` tokens, counted directly; the
        # service interpolates between measured sizes (log-log for the mean), so allow a little
        stretches = [np.unique(inverse[s : s + size]).size for s in range(0, len(inverse) - size + 1, size)]
        assert row["text_types"] == pytest.approx(np.mean(stretches), rel=0.03)
        assert 0.3 * np.std(stretches, ddof=1) < row["text_sd"] < 3 * np.std(stretches, ddof=1)


def test_distinctive_words_match_scipy_log_likelihood_and_hardies_log_ratio(library, tokens):
    engine, ids = library
    pair = (ids["short"], ids["long"])
    settings = service.check_settings(list(ids.values()), pair=pair, min_freq=8, limit=40)
    result = service.live_comparison(engine, settings)["distinctive"]
    c1, c2 = Counter(tokens["short"]), Counter(tokens["long"])
    n1, n2 = len(tokens["short"]), len(tokens["long"])
    assert result["tested"] == sum(1 for w in c1.keys() | c2.keys() if c1[w] + c2[w] >= 8)
    assert len(result["words"]) == 40
    g2s = [w["g2"] for w in result["words"]]
    assert g2s == sorted(g2s, reverse=True)
    for w in result["words"]:
        a, b = c1[w["word"]], c2[w["word"]]
        assert (w["count1"], w["count2"]) == (a, b)
        # reference: scipy.stats.chi2_contingency with lambda_="log-likelihood" (Dunning 1993)
        table = np.array([[a, b], [n1 - a, n2 - b]])
        assert w["g2"] == pytest.approx(
            chi2_contingency(table, correction=False, lambda_="log-likelihood")[0]
        )
        # Hardie (2014): log2 of the ratio of relative frequencies; none for a word of one corpus only
        if a and b:
            assert w["log_ratio"] == pytest.approx(math.log2((a / n1) / (b / n2)), rel=1e-12)
            assert w["log_ratio_low"] < w["log_ratio"] < w["log_ratio_high"] and w["only_in"] is None
        else:
            assert w["log_ratio"] is None and w["only_in"] == (1 if a else 2)
        assert (w["per_million1"], w["per_million2"]) == pytest.approx((a * 1e6 / n1, b * 1e6 / n2))
    csv_lines = service.distinctive_csv({"distinctive": result}).splitlines()
    assert csv_lines[0] == ",".join(service.DISTINCTIVE_COLUMNS) and len(csv_lines) == 41


def test_distinctive_words_of_a_pair_over_the_page_budget_are_refused_with_the_reason(
    library, tokens, monkeypatch
):
    engine, ids = library
    pair = (ids["short"], ids["middle"])
    types = [len(set(tokens["short"])), len(set(tokens["middle"]))]
    # the budget set just below this pair's types (the real one is sized for corpora of 400,000 types)
    monkeypatch.setattr(service, "DISTINCTIVE_MAX_TYPES", sum(types) - 1)
    settings = service.check_settings(list(ids.values()), pair=pair, min_freq=3, limit=10)
    snapshot = service.live_comparison(engine, settings)
    result = snapshot["distinctive"]
    assert result["words"] == [] and result["tested"] == 0
    assert f"{types[0]:,} + {types[1]:,} types" in result["note"]
    assert "not computed in a page" in result["note"]
    assert snapshot["size_matched"]["rows"]  # the rest of the comparison is there

    monkeypatch.setattr(service, "DISTINCTIVE_MAX_TYPES", sum(types))  # at the budget: computed
    other = service.check_settings(list(ids.values()), pair=pair, min_freq=4, limit=10)
    assert len(service.live_comparison(engine, other)["distinctive"]["words"]) == 10


def test_rank_frequency_points_equal_sorted_counts(library, tokens):
    engine, ids = library
    snapshot = service.live_comparison(engine, service.check_settings(list(ids.values())))
    for name, cid in ids.items():
        points = next(p for p in snapshot["rank_frequency"] if p["corpus_id"] == cid)
        ranked = sorted(Counter(tokens[name]).values(), reverse=True)  # reference: counts sorted directly
        assert points["ranks"][0] == 1 and points["ranks"][-1] == len(ranked)
        assert points["frequencies"] == [ranked[r - 1] for r in points["ranks"]]
        assert len(points["ranks"]) <= service.RANK_POINTS
        ranks = np.array(points["ranks"])
        assert np.all(np.diff(ranks) > 0)
        # log-spaced: beyond the first ranks (rounded to whole numbers) each step is about V^(1 / points)
        gaps = np.diff(np.log(ranks))[ranks[:-1] >= 20]
        assert gaps.max() < np.log(len(ranked)) / (service.RANK_POINTS - 1) + np.log(1 + 1 / 20)


def test_thin_curve_keeps_the_ends_and_at_most_about_the_asked_number():
    points = [(n, int(10 * math.sqrt(n))) for n in range(1, 5001)]
    thinned = service.thin_curve(points, 100)
    assert thinned[0] == points[0] and thinned[-1] == points[-1]
    assert len(thinned) <= 101 and thinned == sorted(thinned)
    assert service.thin_curve(points[:50], 100) == points[:50]


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"corpora": [1]}, "between 2 and 8"),
        ({"corpora": list(range(1, 10))}, "got 9"),
        ({"corpora": list(range(10_000))}, "got 10,000"),
        ({"corpora": [3, 3]}, "got 1"),
        ({"corpora": [1, 2], "common_size": -5}, "common_size must lie between 1"),
        ({"corpora": [1, 2], "common_size": 10**30}, "common_size must lie between 1"),
        ({"corpora": [1, 2], "horizon": 0}, "horizon must lie between 1"),
        ({"corpora": [1, 2], "min_freq": 0}, "min_freq"),
        ({"corpora": [1, 2], "limit": 10**6}, "limit"),
        ({"corpora": [1, 2, 3], "pair": [1, 4]}, "pair"),
        ({"corpora": [1, 2, 3], "pair": [2, 2]}, "pair"),
    ],
)
def test_unusable_settings_are_refused_with_a_reason(kwargs, message):
    with pytest.raises(service.ComparisonInputError, match=message):
        service.check_settings(**kwargs)


def test_unknown_corpus_is_reported_by_id(library):
    engine, ids = library
    with pytest.raises(CorpusNotFoundError, match="no corpus with id 999"):
        service.live_comparison(engine, service.check_settings([ids["short"], 999]))


def test_permalink_keeps_its_numbers_after_the_library_changes(library, tokens):
    engine, ids = library
    extra = ingest(engine, [TextSource.from_text("e", " ".join(tokens["middle"][:6000]))], "extra")
    settings = service.check_settings([ids["short"], extra])
    slug = service.save(engine, settings)
    assert re.fullmatch(r"[A-Za-z0-9_-]{16}", slug)  # 12 random bytes = 96 bits
    assert service.save(engine, settings) != slug
    before = service.saved_comparison(engine, slug)
    assert before["notices"] == [] and all(c["available"] for c in before["corpora"])
    assert before["size_matched"]["tokens"] == len(tokens["short"])

    smaller = ingest(engine, [TextSource.from_text("s", " ".join(tokens["long"][:3000]))], "smaller")
    assert service.saved_comparison(engine, slug) == before  # same common size, same numbers

    store.delete_corpus(engine, extra)
    deleted = service.saved_comparison(engine, slug)
    assert deleted["size_matched"] == before["size_matched"]
    assert len(deleted["notices"]) == 1 and "extra" in deleted["notices"][0]
    assert [c["available"] for c in deleted["corpora"]] == [True, False]
    store.delete_corpus(engine, smaller)


def test_warnings_for_different_profiles_and_tiny_corpora(library, tokens):
    engine, ids = library
    # no models for the tiny corpus (only stored): every size shown is within it (common size and horizon 30)
    tiny = ingestion.ingest(
        engine,
        [TextSource.from_text("t", " ".join(tokens["middle"][:30]))],
        "tiny",
        profile=BUILTIN_PROFILES["case-sensitive"],
    )
    snapshot = service.live_comparison(engine, service.check_settings([ids["short"], tiny], horizon=30))
    kinds = [w["kind"] for w in snapshot["warnings"]]
    messages = " ".join(w["message"] for w in snapshot["warnings"])
    assert "profiles" in kinds and "case-sensitive" in messages
    assert "MTLD is unreliable under 100 tokens" in messages and "HD-D needs at least 42 tokens" in messages
    row = rows_by_id(snapshot)[tiny]
    assert row["hd_d"] is None and row["types"] == pytest.approx(len(set(tokens["middle"][:30])))
    store.delete_corpus(engine, tiny)


def test_size_matched_csv_has_the_json_field_names_and_values(library):
    engine, ids = library
    snapshot = service.live_comparison(engine, service.check_settings(list(ids.values())))
    lines = service.size_matched_csv(snapshot).splitlines()
    assert lines[0].split(",") == list(service.TABLE_COLUMNS)
    for line, row in zip(lines[1:], snapshot["size_matched"]["rows"], strict=True):
        cells = dict(zip(service.TABLE_COLUMNS, line.split(","), strict=True))
        assert float(cells["types"]) == row["types"] and cells["basis"] == "interpolated"
