"""Text-level sections of a comparison: corpora compared as collections of texts, not as bags of tokens.

A token-level test of E[V(n)] asks whether random token samples of one size would differ; words cluster in
texts, so for collections of texts the question a lab asks is whether the *texts* of one corpus have a
richer vocabulary than those of another, with texts as the unit (``app.core.text_tests``). Distinctive
words of a pair get the same treatment: keyness across texts (``app.core.text_keyness``) beside G^2.

Both corpora of a pair are given over the union of their words (one column per word, the same on both
sides), built here from each corpus's own word list (``app.services.texts.text_word_counts``).

Where it runs: like the rest of a comparison, in the page's request, kept by the comparison's memo key and
in saved permalinks, under a time limit estimated before they run (``TEXT_TESTS_MAX_SECONDS``), as the
distinctive words are (``comparisons.DISTINCTIVE_MAX_TYPES``). The permutations are drawn from a fixed
seed, so every server process shows the same numbers for the same texts.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import sparse
from sqlalchemy.engine import Engine

from app.core.comparison import holm_adjust
from app.core.richness import HDD_DRAWS
from app.core.text_keyness import text_keyness
from app.core.text_tests import (
    POOLED_PERMUTATIONS,
    PairTextComparison,
    TextComparison,
    pairwise_text_comparisons,
)
from app.services import memo
from app.services.texts import text_word_counts
from app.store import corpora as store
from app.store.tables import Corpus

MIN_TEXT_SIZE = HDD_DRAWS
"""The common text size is never below 42 tokens, the sample of HD-D (McCarthy & Jarvis 2007, 2010), the
smallest per-text sample the literature uses for richness; below it expected types differ little between
texts whatever their vocabulary."""
SEED = 20261205
"""Seed of the permutations, so that the same texts always give the same p-values."""
TEXT_TESTS_MAX_SECONDS = 3.0
"""The longest a page may spend on the text-level tests, estimated before they run (``estimated_seconds``),
as the distinctive words are kept near 3 s (``comparisons.DISTINCTIVE_MAX_TYPES``); beyond, the page says
why it does not compute them."""
PAIR_SECONDS = 0.32
CELL_SECONDS = 1.5e-5
"""Cost of one pair's tests, most of it the whole corpora's ``POOLED_PERMUTATIONS`` deals of two
interpolations each: PAIR_SECONDS + CELL_SECONDS x ((text, word) cells + words of both corpora), fitted to
0.41 s for two corpora of 50 docstring paragraphs (5,755 cells and words) and 5.5 s for 294,700 cells and
50,000 words (``benchmarks/README.md``), measured on the development machine (one core)."""
SHORT_LISTED = 20
"""Texts too short for the common text size are listed by name up to this many per corpus (all counted)."""

TEXT_QUESTION = (
    "Text-level tests answer: do the texts of one corpus have a richer vocabulary than the texts of the "
    "other? Each text counts once, as texts are what a corpus is made of."
)
TOKEN_QUESTION = (
    "Token-level tests (the size-matched tests below) answer: would random samples of {n} tokens of the two corpora differ in their "
    "expected types? They take words as independent draws."
)
TEST_NAMES = {
    "welch": "Welch's t test of the mean per-text E[V(n)]",
    "permutation": "permutation test over texts of the mean per-text E[V(n)]",
    "pooled": "permutation test over texts of the whole corpus's E[V(n)]",
}


@dataclass(frozen=True)
class _Texts:
    corpus: Corpus
    texts: list[tuple[int, str, int, int]]


def _with_texts(engine: Engine, corpora: list[Corpus]) -> tuple[list[_Texts], list[dict[str, Any]]]:
    """The corpora with at least two texts of ``MIN_TEXT_SIZE`` tokens or more (so at least two at the
    common text size), and a warning for each of the others."""
    usable, warnings = [], []
    for corpus in corpora:
        info = store.texts_info(corpus)
        texts = store.corpus_texts(engine, corpus.id) if info else []
        long_enough = sum(1 for t in texts if t[2] >= MIN_TEXT_SIZE)
        if long_enough >= 2:
            usable.append(_Texts(corpus, texts))
            continue
        why = (
            "has no texts (made from counts, a spectrum or a bundle, or stored before texts were kept)"
            if not info
            else f"has {long_enough} text{'s' if long_enough != 1 else ''} of {MIN_TEXT_SIZE} tokens or more "
            f"({len(texts)} in all); the text-level tests need at least two"
        )
        warnings.append(
            {
                "kind": "texts",
                "message": f"{corpus.name} {why}: it is compared by the token-level tests only, which take "
                "words as independent draws and so overstate differences between collections of texts.",
            }
        )
    return usable, warnings


def common_text_size(usable: list[_Texts]) -> int:
    """The tokens of the shortest text of the compared corpora, but at least ``MIN_TEXT_SIZE``."""
    return max(MIN_TEXT_SIZE, min(t[2] for u in usable for t in u.texts))


def whole_corpus_size(usable: list[_Texts], n0: int) -> int:
    """The size of the whole corpora's test: the common size ``n0``, lowered where needed so that every
    pool the test forms holds at least half of it (``app.core.text_tests._pool_types`` continues a pool by
    Good-Toulmin up to twice its tokens, no further): for every pair, each corpus, each corpus without its
    longest text (the jackknife) and the shortest pool a random deal can form, the n texts shortest of
    the pair for a side of n texts. At most the smallest corpus."""
    size = n0
    for i, first in enumerate(usable):
        for second in usable[i + 1 :]:
            lengths = np.sort([t[2] for t in first.texts + second.texts])
            for side in (first, second):
                tokens = [t[2] for t in side.texts]
                size = min(
                    size, sum(tokens), 2 * (sum(tokens) - max(tokens)), 2 * int(lengths[: len(tokens)].sum())
                )
    return max(1, size)


def union_matrices(counts: list) -> list[sparse.csr_matrix]:
    """Each corpus's texts x words counts (``TextWordCounts``) over the union of all their words, in
    code-point order, so that column j is the same word in every matrix."""
    union = np.array(sorted(set().union(*(c.words for c in counts))), dtype=object)
    out = []
    for c in counts:
        matrix = c.matrix.tocsr()
        columns = np.searchsorted(union, np.array(c.words, dtype=object))
        out.append(
            sparse.csr_matrix(
                (matrix.data, columns[matrix.indices], matrix.indptr), shape=(matrix.shape[0], union.size)
            )
        )
    return out


def estimated_seconds(usable: list[_Texts]) -> float:
    """The expected time of the text-level tests of every pair (``PAIR_SECONDS``, ``CELL_SECONDS``)."""
    cells = [sum(t[3] for t in u.texts) + u.corpus.types for u in usable]
    return sum(PAIR_SECONDS + CELL_SECONDS * (a + b) for i, a in enumerate(cells) for b in cells[i + 1 :])


def _test_entry(test, p_holm: float) -> dict[str, Any]:
    return {
        "method": test.method,
        "first": test.first,
        "second": test.second,
        "difference": test.difference,
        "statistic": test.statistic,
        "p": test.p,
        "p_holm": p_holm,
        "low": test.low,
        "high": test.high,
        "level": test.level,
        "texts_first": test.texts_first,
        "texts_second": test.texts_second,
    }


def _pair_entry(pair: PairTextComparison) -> dict[str, Any]:
    """One pair: the lead test (the permutation test of the mean per-text E[V(n)]; its range is Welch's),
    Hedges' g with its range, and every test with its Holm-adjusted p."""
    c: TextComparison = pair.comparison
    holm = dict(zip(TextComparison.TESTS, pair.p_holm, strict=True))
    lead = c.permutation
    return {
        "first": int(pair.first),
        "second": int(pair.second),
        "difference": lead.difference,
        "low": c.welch.low,
        "high": c.welch.high,
        "level": c.welch.level,
        "p": lead.p,
        "p_holm": holm["permutation"],
        "method": f"{lead.method}, per-text E[V({c.first.size})]; range: Welch's t",
        # Hedges' g is undefined (nan) when neither corpus's texts differ at all: null, as JSON has no nan
        "effect": {"measure": "Hedges' g", "level": c.effect.level}
        | {
            key: None if math.isnan(value) else value
            for key, value in (("g", c.effect.g), ("low", c.effect.low), ("high", c.effect.high))
        },
        "tests": {
            name: _test_entry(getattr(c, name), holm[name]) | {"name": TEST_NAMES[name]}
            for name in TextComparison.TESTS
        },
    }


def _richness_entry(item: _Texts, comparison: TextComparison, first: bool) -> dict[str, Any]:
    side = comparison.first if first else comparison.second
    short = [item.texts[i] for i in side.too_short]
    return {
        "corpus_id": item.corpus.id,
        "texts": len(item.texts),
        "tested": side.count,
        "mean": side.mean,
        "sd": side.sd,
        "too_short": len(short),
        "too_short_texts": [
            {"position": p, "name": name, "tokens": tokens} for p, name, tokens, _ in short[:SHORT_LISTED]
        ],
    }


def text_tests(engine: Engine, corpora: list[Corpus], n0: int) -> tuple[dict[str, Any], list[dict]]:
    """The text-level tests of every pair of the corpora that have at least two texts (``size_matched``'s
    ``text_tests`` and ``text_level``), and the warnings for the others: per-text E[V(m)] at the common
    text size m (``common_text_size``; shorter texts listed and left out), its mean and sd per corpus, and
    per pair Welch's t, the permutation test and Hedges' g of it, and the permutation test of the whole
    corpora's E[V] at the common size (at most the smallest corpus tested), Holm-adjusted over the pairs."""
    usable, warnings = _with_texts(engine, corpora)
    level: dict[str, Any] = {
        "question": TEXT_QUESTION,
        "token_question": TOKEN_QUESTION.format(n=f"{n0:,}"),
        "without_texts": [c.id for c in corpora if c.id not in {u.corpus.id for u in usable}],
        "available": False,
        "reason": None,
    }
    if len(usable) < 2:
        level["reason"] = (
            f"the text-level tests need two corpora of at least two texts of {MIN_TEXT_SIZE} tokens or more each"
        )
        return {"text_tests": [], "text_level": level}, warnings
    seconds = estimated_seconds(usable)
    if seconds > TEXT_TESTS_MAX_SECONDS:
        pairs = len(usable) * (len(usable) - 1) // 2
        level["reason"] = (
            f"the text-level tests are not computed in a page for this comparison: {pairs} pairs with "
            f"{POOLED_PERMUTATIONS:,} permutations each would take about {seconds:.1f} s, more than the "
            f"{TEXT_TESTS_MAX_SECONDS:.0f} s a page may take; compare fewer corpora at a time"
        )
        return {"text_tests": [], "text_level": level}, warnings
    text_size = common_text_size(usable)
    pooled_size = whole_corpus_size(usable, n0)
    memo.checkpoint()
    matrices = union_matrices([text_word_counts(engine, u.corpus.id) for u in usable])
    memo.checkpoint()
    try:
        pairs = pairwise_text_comparisons(
            matrices,
            [str(u.corpus.id) for u in usable],
            text_size,
            pooled_size,
            np.random.default_rng(SEED),
        )
    except ValueError as exc:
        level["reason"] = str(exc)
        return {"text_tests": [], "text_level": level}, warnings
    by_id = {u.corpus.id: u for u in usable}
    rows: dict[int, dict[str, Any]] = {}
    for pair in pairs:
        for first, cid in ((True, int(pair.first)), (False, int(pair.second))):
            rows.setdefault(cid, _richness_entry(by_id[cid], pair.comparison, first))
    return {
        "text_tests": [_pair_entry(p) for p in pairs],
        "text_level": level
        | {
            "available": True,
            "text_size": text_size,
            "text_size_rule": f"the tokens of the shortest text of the compared corpora, but at least "
            f"{MIN_TEXT_SIZE} (the sample of HD-D); shorter texts are listed and left out",
            "pooled_size": pooled_size,
            "pooled_size_rule": "the common size, lowered where needed so that every pool of texts the "
            "test forms holds at least half of it",
            "rows": [rows[u.corpus.id] for u in usable],
        },
    }, warnings


def distinctive_across_texts(engine: Engine, distinctive: dict[str, Any]) -> dict[str, Any]:
    """Keyness across texts (``app.core.text_keyness``) of the distinctive words of a pair (the snapshot's
    ``distinctive``): per word shown, in how many of each corpus's texts it occurs, its pooled frequency
    per million tokens on each side, and the Mann-Whitney U test of its per-text relative frequencies
    (and Welch's t), two-sided, each Holm-adjusted over the same words as G^2 (those occurring at least
    ``min_freq`` times in the pair together), shown beside their G^2 and log ratio. Unavailable, with the
    reason, unless both corpora have at least two texts."""
    pair = (distinctive["first"], distinctive["second"])
    found = store.get_corpora(engine, list(pair))
    corpora = [found[cid] for cid in pair]
    if distinctive.get("note"):
        return {"available": False, "reason": distinctive["note"], "words": []}
    without = [c.name for c in corpora if (store.texts_info(c) or {}).get("texts", 0) < 2]
    if without:
        return {
            "available": False,
            "reason": f"no keyness across texts: {', '.join(without)} has fewer than two texts; the G² test "
            "above takes every token as an independent draw",
            "words": [],
        }
    memo.checkpoint()
    counts = [text_word_counts(engine, cid) for cid in pair]
    first, second = union_matrices(counts)
    words = sorted(set(counts[0].words) | set(counts[1].words))
    keyness = text_keyness(first, second)
    tested = np.flatnonzero(
        np.asarray(first.sum(axis=0)).ravel() + np.asarray(second.sum(axis=0)).ravel()
        >= distinctive["min_freq"]
    )
    holm_u = dict(zip(tested, holm_adjust(keyness.p_mann_whitney[tested]), strict=True))
    holm_t = dict(zip(tested, holm_adjust(keyness.p_welch[tested]), strict=True))
    column = {w: j for j, w in enumerate(words)}
    shown = []
    for entry in distinctive["words"]:
        j = column[entry["word"]]
        shown.append(
            {
                "word": entry["word"],
                "g2": entry["g2"],
                "log_ratio": entry["log_ratio"],
                "in_texts_first": int(keyness.in_texts_first[j]),
                "in_texts_second": int(keyness.in_texts_second[j]),
                "per_million_first": float(keyness.per_million_first[j]),
                "per_million_second": float(keyness.per_million_second[j]),
                "p_mann_whitney": float(keyness.p_mann_whitney[j]),
                "p_mann_whitney_holm": float(holm_u[j]),
                "t": float(keyness.t[j]),
                "p_welch_holm": float(holm_t[j]),
            }
        )
    return {
        "available": True,
        "reason": None,
        "first": pair[0],
        "second": pair[1],
        "texts_first": keyness.texts_first,
        "texts_second": keyness.texts_second,
        "tested": int(tested.size),
        "method": "Mann-Whitney U (normal approximation with tie and continuity corrections) and Welch's t "
        "of the per-text relative frequencies, texts as the unit; p (Holm) over the words tested by G²",
        "words": shown,
    }
