"""The texts of a corpus: their table, their word counts for text-level statistics, and vocabulary growth
and planning with texts as the unit (``app.core.text_growth``).

The growth by texts (the exact rarefaction over the corpus's texts, the extrapolation with its bootstrap
replicates) is computed when the corpus is stored, in the upload's task and in the same transaction
(``growth_results``), and kept as a cached result under ``GROWTH_KEY``: a fingerprint of the code that
computes it alone (``app.core.text_growth`` and this module), so that other changes to the maths core do
not make it stale. Only a corpus stored before, or by other code of these two modules, has it computed on
its first request: one pass over the texts' packed counts, then ``BOOTSTRAP_REPLICATES`` passes of
``np.bincount`` over its (text, word) pairs, measured at about 1.1 microseconds of CPU per pair (0.5 s for
500,000 pairs, 1.4 s for 1.3 million), plus reading the texts (1.5 s for 100,000 texts): 3.4 s in all for
100,000 texts with 1.9 million pairs. Planning only reads the kept numbers (a few ms).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from scipy import sparse
from sqlalchemy.engine import Engine

from app.config import PROGRAM_VERSION
from app.core import text_growth as tg
from app.core.dispersion import Dispersion, dispersion
from app.ingest.texts import TextCounts
from app.services.memo import RecentResults
from app.services.modelling import code_fingerprint
from app.store import corpora as store
from app.store.tables import Corpus

TEXT_GROWTH = "text_growth"
GROWTH_KEY = f"{PROGRAM_VERSION}+code-{code_fingerprint((Path(tg.__file__), Path(__file__)))}"
RANGE_LEVEL = 0.9
INTERPOLATION_POINTS = 60
DEFAULT_HORIZON = 2.0
"""Extrapolate to twice the corpus's texts by default: Chao et al. 2014 advise against going further."""
MAX_HORIZON = 10.0
NO_TEXTS = (
    "this corpus has no texts: it was made from a word-count list without a text column, a spectrum or a "
    "bundle, or stored before texts were kept, so it has no text-level statistics"
)


class NoTextsError(ValueError):
    """A text-level view of a corpus that has no texts (or too few); the message says why."""


@dataclass(frozen=True)
class TextWordCounts:
    """Per-text word counts of a corpus: ``matrix`` is a sparse (texts x words) matrix of counts (CSR,
    int64), row i the text ``texts[i]`` (position, name, tokens, types), column j the word ``words[j]``
    (the corpus's word list in code-point order)."""

    texts: list[tuple[int, str, int, int]]
    words: list[str]
    matrix: sparse.csr_matrix


def texts_info(engine: Engine, corpus_id: int) -> dict[str, Any] | None:
    """How the corpus's texts were found (separator, number of texts, empty texts skipped), or None."""
    return store.texts_info(store.get_corpus(engine, corpus_id))


def _require_texts(engine: Engine, corpus_id: int) -> dict[str, Any]:
    info = texts_info(engine, corpus_id)
    if info is None:
        raise NoTextsError(NO_TEXTS)
    return info


def text_table(engine: Engine, corpus_id: int, limit: int | None = 100, offset: int = 0) -> dict[str, Any]:
    """The texts of a corpus (position, name, tokens, types), a page at a time; raises NoTextsError."""
    info = _require_texts(engine, corpus_id)
    rows = store.corpus_texts(engine, corpus_id, limit=limit, offset=offset)
    return {
        "separator": info.get("separator"),
        "total": info.get("texts", len(rows)),
        "empty_skipped": info.get("empty_skipped", 0),
        "offset": offset,
        "texts": [{"position": p, "name": n, "tokens": t, "types": v} for p, n, t, v in rows],
    }


def text_word_counts(engine: Engine, corpus_id: int) -> TextWordCounts:
    """Every text's word counts as a sparse (texts x words) matrix, for text-level statistics (dispersion,
    keyness over texts, per-text richness). Raises NoTextsError for a corpus without texts."""
    _require_texts(engine, corpus_id)
    words = sorted(store.frequencies(engine, corpus_id))
    texts = store.corpus_texts(engine, corpus_id)
    rows, cols, values = [], [], []
    for row, (_position, packed_ranks, packed_counts) in enumerate(
        store.packed_text_counts(engine, corpus_id)
    ):
        ranks, counts = TextCounts.unpack(packed_ranks, packed_counts)
        rows.append(np.full(ranks.size, row, dtype=np.int64))
        cols.append(ranks)
        values.append(counts)
    matrix = sparse.csr_matrix(
        (
            np.concatenate([np.zeros(0, np.int64), *values]),
            (np.concatenate([np.zeros(0, np.int64), *rows]), np.concatenate([np.zeros(0, np.int64), *cols])),
        ),
        shape=(len(texts), len(words)),
        dtype=np.int64,
    )
    return TextWordCounts(texts, words, matrix)


def growth_of(texts: int, pair_text: np.ndarray, pair_type: np.ndarray, types: int) -> dict[str, Any]:
    """The growth-by-texts payload of a corpus given as its (text, type) incidence pairs: the incidence
    frequencies Q_j, Chao2, the exact rarefaction at up to ``INTERPOLATION_POINTS`` numbers of texts with
    its nominal 90% range, and the bootstrap replicates the extrapolation's range is made from."""
    document_frequency = np.bincount(pair_type, minlength=types)
    incidence = tg.Incidence.from_document_frequencies(texts, document_frequency)
    k = np.unique(np.rint(np.linspace(0, texts, min(INTERPOLATION_POINTS, texts + 1))).astype(np.int64))
    expected = tg.expected_types(incidence, k)
    sd = np.sqrt(tg.rarefaction_variance(incidence, k))
    observed = incidence.observed_types
    boot = tg.bootstrap_over_texts(texts, pair_text, pair_type, types)
    return {
        "texts": texts,
        "types": observed,
        "incidence": [list(pair) for pair in incidence.frequencies],
        "chao2": incidence.chao2,
        "interpolation": [
            {
                "texts": int(n),
                "types": float(e),
                "sd": float(s),
                "low": float(np.clip(e - tg.Z90 * s, 0, observed)),
                "high": float(np.clip(e + tg.Z90 * s, 0, observed)),
            }
            for n, e, s in zip(k, expected, sd, strict=True)
        ],
        "bootstrap": {
            "replicates": int(boot.observed.size),
            "observed": boot.observed.tolist(),
            "q1": boot.q1.tolist(),
            "undetected": boot.undetected.tolist(),
        },
    }


def growth_results(texts: list[TextCounts], types: int) -> dict[str, tuple[str, dict]]:
    """The results a new corpus with texts is stored with (result kind -> (version, payload))."""
    if not texts:
        return {}
    pair_text = np.repeat(np.arange(len(texts), dtype=np.int64), [t.types for t in texts])
    pair_type = np.concatenate([t.ranks for t in texts]).astype(np.int64)
    return {TEXT_GROWTH: (GROWTH_KEY, growth_of(len(texts), pair_text, pair_type, types))}


def _stored_growth(engine: Engine, corpus_id: int) -> dict[str, Any]:
    _require_texts(engine, corpus_id)

    payload = store.cached_result(engine, corpus_id, TEXT_GROWTH, GROWTH_KEY)
    if payload is None:
        counts = text_word_counts(engine, corpus_id).matrix.tocoo()
        payload = growth_of(counts.shape[0], counts.row, counts.col, counts.shape[1])
        store.store_cached_result(engine, corpus_id, TEXT_GROWTH, GROWTH_KEY, payload)
    return payload


def _incidence(payload: dict[str, Any]) -> tuple[tg.Incidence, tg.Replicates]:
    boot = payload["bootstrap"]
    incidence = tg.Incidence(payload["texts"], tuple((int(j), int(q)) for j, q in payload["incidence"]))
    replicates = tg.Replicates(
        payload["texts"], np.array(boot["observed"]), np.array(boot["q1"]), np.array(boot["undetected"])
    )
    return incidence, replicates


def text_growth(engine: Engine, corpus_id: int, horizon: float = DEFAULT_HORIZON) -> dict[str, Any]:
    """Growth by texts: the exact expectation over random subsets of the corpus's texts and its range up to
    T texts, then the extrapolation to ``horizon`` x T texts with its bootstrap range. Raises NoTextsError."""
    if not 1.0 <= horizon <= MAX_HORIZON:
        raise ValueError(f"horizon: a multiple of the corpus's texts from 1 to {MAX_HORIZON:g}")
    payload = _stored_growth(engine, corpus_id)
    incidence, boot = _incidence(payload)
    texts = incidence.texts
    more = np.unique(np.rint(np.linspace(0, (horizon - 1) * texts, INTERPOLATION_POINTS)).astype(np.int64))
    expected = tg.extrapolated_types(incidence, more)
    sd = tg.extrapolation_sd(boot, more)
    return {
        "texts": texts,
        "types": payload["types"],
        "incidence": payload["incidence"],
        "chao2": payload["chao2"],
        "interpolation": {
            "method": "exact expectation over random subsets of the texts, drawn without replacement",
            "range": {
                "level": RANGE_LEVEL,
                "method": "+-1.645 sd, the unconditional variance of incidence-based rarefaction "
                "(Colwell et al. 2012; Chao et al. 2014)",
            },
            "points": payload["interpolation"],
        },
        "extrapolation": {
            "method": "incidence-based extrapolation towards Chao2 (Chao et al. 2014)",
            "range": {
                "level": RANGE_LEVEL,
                "method": f"+-1.645 bootstrap standard errors ({payload['bootstrap']['replicates']} resamples "
                "of the texts)",
            },
            "points": [
                {
                    "texts": int(texts + t),
                    "types": float(e),
                    "sd": float(s),
                    "low": float(max(e - tg.Z90 * s, payload["types"])),
                    "high": float(e + tg.Z90 * s),
                }
                for t, e, s in zip(more, expected, sd, strict=True)
            ],
        },
    }


def plan_texts(engine: Engine, corpus_id: int, types: float) -> dict[str, Any]:
    """How many more texts of this kind until the corpus holds ``types`` types, with a range; raises
    NoTextsError, or ``tg.UnreachableTextTargetError`` with the reason."""
    incidence, boot = _incidence(_stored_growth(engine, corpus_id))
    plan = tg.plan_texts(incidence, boot, types)
    return {
        "target_types": plan.target,
        "texts_now": incidence.texts,
        "more_texts": plan.more,
        "more_texts_low": plan.more_low,
        "more_texts_high": plan.more_high,
        "total_texts": incidence.texts + plan.more,
        "range": {
            "level": RANGE_LEVEL,
            "method": "where the ends of the extrapolation's nominal 90% range reach the target",
        },
        "note": None
        if plan.more_high is not None
        else f"the lower end of the range does not reach the target within {plan.largest:,} further texts",
    }


DISPERSION_METHOD = (
    "in k of n texts: the texts holding the word; DP: Gries' deviation of proportions (Gries 2008), 0 for a "
    "word spread over the texts in proportion to their sizes, near 1 for a word in one text; Juilland's D "
    "(Juilland & Chang-Rodriguez 1964) over the texts' relative frequencies, 1 for a perfectly even word, "
    "0 for a word in one text"
)
_dispersions: RecentResults[tuple[dict[str, int], Dispersion]] = RecentResults(8)
"""Per process, the dispersion of every word of the last corpora asked for: reading a corpus's texts is
the cost (1.5 s for 100,000 texts; the dispersion of 294,700 (text, word) cells takes 0.03 s), paid once
per corpus and process, and only by a page or JSON answer of its word list."""


def word_dispersion(engine: Engine, corpus: Corpus, words: list[str]) -> dict[str, Any] | None:
    """How the given words spread over the corpus's ``texts`` (``app.core.dispersion``): per word
    ``in_texts`` (in how many of them), ``dp``, ``dp_norm`` and ``juilland_d``; None for a corpus with
    fewer than two texts."""
    info = store.texts_info(corpus)
    if info is None or info.get("texts", 0) < 2:
        return None

    def compute() -> tuple[dict[str, int], Dispersion]:
        counts = text_word_counts(engine, corpus.id)
        return {w: j for j, w in enumerate(counts.words)}, dispersion(counts.matrix)

    key = (str(engine.url), corpus.id, corpus.content_hash, corpus.created_at.isoformat())
    column, spread = _dispersions.get(key, compute)
    out = {}
    for word in words:
        j = column.get(word)
        if j is not None:
            out[word] = {
                "in_texts": int(spread.texts_with_word[j]),
                "dp": float(spread.dp[j]),
                "dp_norm": float(spread.dp_norm[j]),
                "juilland_d": float(spread.juilland_d[j]),
            }
    return {"texts": spread.texts, "method": DISPERSION_METHOD, "words": out}
