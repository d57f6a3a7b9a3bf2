"""Comparison service: 2 to 8 corpora side by side at one common size, as a snapshot of plain numbers.

A snapshot holds everything a comparison page shows: the resolved settings, the corpora as they were, the
size-matched table with pairwise z tests, the text-order and random-order spreads, the curves of the figures
(thinned), the legomena profiles, rank-frequency points, distinctive words of one pair, and the warnings.
Live pages build a snapshot (kept in a small in-memory cache), permalinks store it, and both render from it,
so a saved comparison shows the same numbers later, whatever happens to the library.

Sizes up to a corpus's own N are exact random-sample interpolations (app.core.interpolation); sizes beyond it
come from the recommended model of the modelling service and are marked model-based.
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass
from datetime import UTC, datetime
from typing import Any, NamedTuple

import numpy as np
from sqlalchemy.engine import Engine

from app.config import PROGRAM_VERSION
from app.core import richness
from app.core.anchored import Anchored
from app.core.comparison import (
    LOG_RATIO_LEVEL,
    distinctive_words,
    pairwise_z_tests,
    size_matched,
)
from app.core.interpolation import expected_spectrum, types_band
from app.core.models import Predictor
from app.core.models.base import RANGE_LEVEL, Z90
from app.core.spectrum import Spectrum
from app.core.text_order import MAX_SEGMENTS, SegmentSpread, interpolate_spread
from app.core.validity import checked_prediction
from app.services import memo, modelling, text_comparisons
from app.services.export import table_text
from app.services.memo import RecentResults
from app.store import comparisons as saved
from app.store import corpora as store
from app.store.corpora import CorpusNotFoundError
from app.store.tables import Corpus, SavedComparison

ComparisonNotFoundError = saved.ComparisonNotFoundError
"""No saved comparison at the address asked for."""

MIN_CORPORA, MAX_CORPORA = 2, 8
MAX_TOKENS = modelling.MAX_PREDICTION_TOKENS
MAX_MIN_FREQ = 10**9
DEFAULT_MIN_FREQ = 5
DEFAULT_LIMIT, MAX_LIMIT = 100, 5000
LEGOMENA_K = 10
CURVE_POINTS = 120
RANK_POINTS = 150
MODEL_POINTS = 40
MTLD_MIN_TOKENS = 100  # McCarthy & Jarvis (2010) advise at least 100 tokens (common practice)
EXTRAPOLATION_WARNING_FACTOR = 10
SPREAD_MIN_SEGMENTS = 10
CACHE_SIZE = 32
MODEL_ERRORS = (ValueError, ArithmeticError, KeyError, np.linalg.LinAlgError)

CAUTION = (
    "Vocabulary statistics alone are not evidence of authorship or misconduct. Differences in vocabulary "
    "also come from topic, register, genre, editing, copying and tokenization; read them as a "
    "description of the texts, never as proof about the people who wrote them."
)
SPREAD_NOTE = (
    "Random order: the spread of the type count over random samples of {n} tokens of the corpus, as if its "
    "words were shuffled (exact hypergeometric). Text order: the spread over consecutive stretches of {n} "
    "tokens of the actual text, measured at ingestion. Real texts cluster words by topic, so the text-order "
    "spread is usually the wider one, and the random-order figures understate how much real texts of this "
    "size vary."
)
TABLE_COLUMNS = (
    "corpus_id",
    "name",
    "tokens",
    "basis",
    "types",
    "types_sd",
    "types_low",
    "types_high",
    "hapaxes",
    "dis_legomena",
    "ttr",
    "ttr_sd",
    "hd_d",
    "mtld",
    "yule_k",
    "not_applicable",
)
UNTESTED_REASON = {
    "model-based": "model-based value: its range is a backtest error, not a sampling spread",
    "unavailable": "no value at this size",
}
DISTINCTIVE_COLUMNS = (
    "word",
    "count1",
    "count2",
    "per_million1",
    "per_million2",
    "g2",
    "p",
    "p_holm",
    "log_ratio",
    "log_ratio_low",
    "log_ratio_high",
    "only_in",
)


class ComparisonInputError(ValueError):
    """Settings that cannot make a comparison; the message says why."""


@dataclass(frozen=True)
class ComparisonSettings:
    """What the user chose: corpus ids (2..8), optional common size and horizon (tokens), the pair for
    distinctive words, its minimum frequency and the number of words kept."""

    corpora: tuple[int, ...]
    common_size: int | None = None
    horizon: int | None = None
    pair: tuple[int, int] | None = None
    min_freq: int = DEFAULT_MIN_FREQ
    limit: int = DEFAULT_LIMIT

    def as_dict(self) -> dict[str, Any]:
        out = asdict(self)
        out["corpora"] = list(self.corpora)
        out["pair"] = list(self.pair) if self.pair else None
        return out


def _bounded(name: str, value: int | None, low: int, high: int) -> int | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int):
        raise ComparisonInputError(f"{name} must be a whole number")
    if not low <= value <= high:
        raise ComparisonInputError(f"{name} must lie between {low:,} and {high:,} (got {value:,})")
    return value


def check_settings(
    corpora: list[int],
    common_size: int | None = None,
    horizon: int | None = None,
    pair: list[int] | tuple[int, ...] | None = None,
    min_freq: int | None = None,
    limit: int | None = None,
) -> ComparisonSettings:
    """Validate the settings (not yet whether the corpora exist); a repeated id counts once, and None means
    the default."""
    ids = tuple(dict.fromkeys(corpora))
    if not MIN_CORPORA <= len(ids) <= MAX_CORPORA:
        raise ComparisonInputError(
            f"choose between {MIN_CORPORA} and {MAX_CORPORA} different corpora to compare (got {len(ids):,})"
        )
    if pair is not None:
        pair = tuple(pair)
        if len(pair) != 2 or pair[0] == pair[1] or not set(pair) <= set(ids):
            raise ComparisonInputError(
                "the pair for distinctive words must be two different compared corpora"
            )
    return ComparisonSettings(
        ids,
        _bounded("common_size", common_size, 1, MAX_TOKENS),
        _bounded("horizon", horizon, 1, MAX_TOKENS),
        pair,
        _bounded("min_freq", DEFAULT_MIN_FREQ if min_freq is None else min_freq, 1, MAX_MIN_FREQ),
        _bounded("limit", DEFAULT_LIMIT if limit is None else limit, 1, MAX_LIMIT),
    )


# ------------------------------------------------------------------------------------------ helpers


def _num(value: float | None) -> float | None:
    """A JSON-safe number: None for missing or non-finite values."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _nums(values) -> list[float | None]:
    return [_num(v) for v in np.asarray(values, dtype=float)]


def thin_curve(points: list[tuple[int, int]], count: int = CURVE_POINTS) -> list[tuple[int, int]]:
    """At most about ``count`` of the (tokens, types) points, nearest to log-spaced and evenly spaced targets,
    always keeping the first and the last."""
    if len(points) <= count:
        return list(points)
    tokens = np.array([n for n, _ in points], dtype=float)
    targets = np.concatenate(
        [np.geomspace(tokens[0], tokens[-1], count // 2), np.linspace(tokens[0], tokens[-1], count // 2)]
    )
    keep = np.unique(np.clip(np.searchsorted(tokens, targets), 0, len(points) - 1))
    return [points[i] for i in np.union1d(keep, [0, len(points) - 1])]


def rank_frequency_points(spectrum: Spectrum, count: int = RANK_POINTS) -> tuple[list[int], list[int]]:
    """Frequency at about ``count`` log-spaced ranks, from the spectrum alone.

    With types sorted by descending frequency, the types of frequency m take the ranks from (number of types
    with f > m) + 1 to (number of types with f >= m), so the frequency at rank r is m of the first class,
    from the top, whose last rank reaches r.
    """
    if spectrum.types == 0:
        return [], []
    m_desc = spectrum.m[::-1]
    last_rank = np.cumsum(spectrum.vm[::-1])
    ranks = np.unique(np.rint(np.geomspace(1, spectrum.types, count)).astype(np.int64))
    return ranks.tolist(), m_desc[np.searchsorted(last_rank, ranks)].tolist()


@dataclass(frozen=True)
class _Member:
    """One compared corpus with what the snapshot needs of it."""

    corpus: Corpus
    spectrum: Spectrum
    text_order: dict[str, Any]
    text_order_damage: str | None
    predictor: Predictor | None
    model_failure: str | None


def _member(engine: Engine, corpus: Corpus, largest_size: int) -> _Member:
    """The corpus with its spectrum, text-order statistics and, only when a size beyond the corpus is asked
    for (``largest_size``), its recommended model (fits are cached by the modelling service)."""
    try:
        spectrum = modelling.load_spectrum(engine, corpus.id)
    except ValueError as exc:  # rows the store holds but no version of this program writes
        raise ComparisonInputError(
            f"{corpus.name} (corpus {corpus.id}) cannot be compared: its stored spectrum is damaged ({exc})"
        ) from exc
    predictor = failure = None
    if largest_size > corpus.tokens:
        try:
            # beyond N the service's prediction: the recommended model continued from the corpus; its growth
            # factor is computed here, so that a model that cannot be continued is a failure like any other
            anchored = Anchored(modelling.predictors(engine, corpus.id)[modelling.RECOMMENDED], spectrum)
            anchored.growth_factor()
            predictor = anchored
        except MODEL_ERRORS as exc:
            failure = str(exc) or type(exc).__name__
    return _Member(corpus, spectrum, *modelling.stored_text_order(corpus), predictor, failure)


def _corpus_entry(corpus: Corpus, index: int) -> dict[str, Any]:
    summary = store.summary(corpus)
    return {
        "id": corpus.id,
        "name": corpus.name,
        "labels": summary["labels"],
        "profile": summary["profile"],
        "tokens": corpus.tokens,
        "types": corpus.types,
        "hapaxes": corpus.hapaxes,
        "content_hash": corpus.content_hash,
        "created_at": summary["created_at"],
        "program_version": corpus.program_version,
        "colour_index": index,
    }


# ------------------------------------------------------------------------------------- size matching


def _size_matched_row(member: _Member, n0: int) -> dict[str, Any]:
    corpus, spectrum = member.corpus, member.spectrum
    row: dict[str, Any] = {
        "corpus_id": corpus.id,
        "name": corpus.name,
        "tokens": n0,
        "hd_d": _num(richness.hd_d(spectrum)),
        "mtld": _num(member.text_order.get("mtld")),
        "yule_k": _num(richness.yule_k(spectrum)),
        "extrapolation_factor": n0 / corpus.tokens,
        "not_applicable": None,
    }
    if n0 <= corpus.tokens:
        matched = size_matched([spectrum], n0)[0]
        legomena = expected_spectrum(spectrum, n0, LEGOMENA_K)
        return row | {
            "basis": "interpolated",
            "method": "exact random-sample interpolation (hypergeometric)",
            "types": _num(matched.types),
            "types_sd": _num(matched.sd_population),
            "types_sd_random": _num(matched.sd),
            "types_low": _num(matched.types - Z90 * matched.sd_population),
            "types_high": _num(matched.types + Z90 * matched.sd_population),
            "hapaxes": _num(matched.hapaxes),
            "dis_legomena": _num(matched.dis_legomena),
            "ttr": _num(matched.types / n0),
            "ttr_sd": _num(matched.sd_population / n0),
            "legomena": _nums(legomena),
        }
    # beyond N the checked prediction of the core (app.core.validity), as the corpus page shows it
    checked = None if member.predictor is None else checked_prediction(member.predictor, n0, LEGOMENA_K)
    if checked is None or checked.not_applicable:
        reason = (
            f"no model could extrapolate this corpus: {member.model_failure or 'no finite value'}"
            if checked is None
            else f"the recommended model's prediction is not applicable: {checked.not_applicable}"
        )
        return row | {
            "basis": "unavailable",
            "method": reason,
            "not_applicable": reason,
            **dict.fromkeys(
                ("types", "types_sd", "types_sd_random", "types_low", "types_high", "hapaxes"), None
            ),
            **dict.fromkeys(("dis_legomena", "ttr", "ttr_sd", "legomena"), None),
        }
    types, low, high, legomena = checked.types, checked.types_low, checked.types_high, checked.legomena
    return row | {
        "basis": "model-based",
        "method": "recommended model, continued from the corpus's own types and new-type rate beyond its size",
        "types": _num(types),
        "types_sd": None,
        "types_sd_random": None,
        "types_low": _num(low),
        "types_high": _num(high),
        "hapaxes": _num(legomena[0]),
        "dis_legomena": _num(legomena[1]),
        "ttr": _num(types / n0),
        "ttr_sd": None,
        "legomena": _nums(legomena),
    }


def _tests(rows: list[dict[str, Any]]) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """Pairwise z tests of E[V(n0)] among interpolated rows (Holm over those), and the pairs left untested."""
    tested = [r for r in rows if r["basis"] == "interpolated"]
    results = pairwise_z_tests(
        [r["types"] for r in tested],
        [r["types_sd"] or 0.0 for r in tested],
        [str(r["corpus_id"]) for r in tested],
    )
    tests = [
        {
            "first": int(t.first),
            "second": int(t.second),
            "difference": _num(t.difference),
            "z": _num(t.z),
            "p": _num(t.p),
            "p_holm": _num(t.p_holm),
        }
        for t in results
    ]
    untested = [
        {
            "first": a["corpus_id"],
            "second": b["corpus_id"],
            "reason": UNTESTED_REASON[b["basis"] if a["basis"] == "interpolated" else a["basis"]],
        }
        for i, a in enumerate(rows)
        for b in rows[i + 1 :]
        if a["basis"] != "interpolated" or b["basis"] != "interpolated"
    ]
    return tests, untested


def _segments(member: _Member) -> list[SegmentSpread]:
    return [SegmentSpread(**s) for s in member.text_order.get("segments") or []]


def _spread_missing(
    member: _Member, segments: list[SegmentSpread], size: int, no_random: bool, no_text: bool
) -> str | None:
    """Why a row of the spread table lacks numbers, in words (None when it has them all)."""
    reasons = []
    if no_random:
        reasons.append(f"the corpus has fewer than {size:,} tokens, so no random sample of that size")
    if no_text and not store.source(member.corpus)["text_order"]:
        reasons.append("no text order: the corpus was made from counts, not from a text")
    elif no_text and not segments:
        reasons.append("the text is too short (under 100 tokens) for stretches to be measured")
    elif no_text:
        reasons.append(
            f"stretches were measured from {segments[0].size:,} to {segments[-1].size:,} tokens, "
            f"not at {size:,}"
        )
    return "; ".join(reasons) or None


def _spread(members: list[_Member], n0: int) -> dict[str, Any]:
    """Random-order and text-order spread of V at one size: n0, or less where needed so that every corpus
    with text segments has at least SPREAD_MIN_SEGMENTS non-overlapping stretches of that size."""
    measured = [(m, _segments(m), m.text_order.get("measured_tokens") or m.corpus.tokens) for m in members]
    lengths = [length for _, segments, length in measured if segments]
    if not lengths:
        return {
            "tokens": None,
            "rows": [],
            "note": "No corpus is long enough (100 tokens) for text segments.",
        }
    size = max(1, min(n0, min(lengths) // SPREAD_MIN_SEGMENTS))
    rows = []
    for member, segments, length in measured:
        random_band = types_band(member.spectrum, size) if size <= member.spectrum.tokens else None
        text = interpolate_spread(segments, size)
        rows.append(
            {
                "corpus_id": member.corpus.id,
                "random_types": _num(random_band.types) if random_band else None,
                "random_sd": _num(random_band.sd) if random_band else None,
                "text_types": _num(text[0]) if text else None,
                "text_sd": _num(text[1]) if text else None,
                "segments": min(length // size, MAX_SEGMENTS) if text else 0,
                "missing": _spread_missing(member, segments, size, random_band is None, text is None),
            }
        )
    note = SPREAD_NOTE.format(n=f"{size:,}")
    if size < n0:
        note += (
            f" The size is below the common size so that every corpus with text stretches gives at least "
            f"{SPREAD_MIN_SEGMENTS} of them."
        )
    return {"tokens": size, "rows": rows, "note": note}


# --------------------------------------------------------------------------------------------- curves


def _random_order(engine: Engine, corpus: Corpus) -> tuple[dict[str, list], str | None]:
    """The random-order growth curve of a corpus, or empty lists and a warning when its stored copy is
    damaged (edited by hand, or left by another program)."""
    try:
        points = modelling.random_order_growth(engine, corpus.id)["points"]
        return {
            "tokens": [int(p["tokens"]) for p in points],
            **{key: [_num(p[key]) for p in points] for key in ("types", "low", "high")},
        }, None
    except (KeyError, TypeError, ValueError) as exc:
        empty: dict[str, list] = {"tokens": [], "types": [], "low": [], "high": []}
        return empty, (
            f"{corpus.name}: its stored random-order growth curve is damaged and not shown "
            f"({exc.__class__.__name__}: {str(exc)[:100]})."
        )


def _growth(engine: Engine, member: _Member, horizon: int, random_order: dict[str, list]) -> dict[str, Any]:
    corpus = member.corpus
    text_order = thin_curve(store.growth_points(engine, corpus.id))
    model = None
    if member.predictor is not None and horizon > corpus.tokens:
        sizes = np.unique(np.rint(np.geomspace(corpus.tokens, horizon, MODEL_POINTS))).astype(float)
        model = {
            "name": modelling.RECOMMENDED,
            "tokens": sizes.astype(np.int64).tolist(),
            "types": _nums(member.predictor.types(sizes)),
            "low": _nums(member.predictor.types_low(sizes)),
            "high": _nums(member.predictor.types_high(sizes)),
        }
    return {
        "corpus_id": corpus.id,
        "text_order": {"tokens": [n for n, _ in text_order], "types": [v for _, v in text_order]},
        "random_order": random_order,
        "model": model,
    }


def _legomena(members: list[_Member], rows: list[dict[str, Any]]) -> dict[str, Any]:
    profiles = []
    for member, row in zip(members, rows, strict=True):
        spectrum = member.spectrum
        observed = spectrum.dense(LEGOMENA_K) / spectrum.types if spectrum.types else None
        predicted = (
            [None if v is None else v / row["types"] for v in row["legomena"]]
            if row["legomena"] and row["types"]
            else None
        )
        profiles.append(
            {
                "corpus_id": member.corpus.id,
                "observed": None if observed is None else _nums(observed),
                "predicted": predicted,
            }
        )
    return {"k": list(range(1, LEGOMENA_K + 1)), "rows": profiles}


DISTINCTIVE_MAX_TYPES = 400_000
"""The most types (both corpora together) whose distinctive words a page computes. Reading both word lists
and testing every word runs at about 150,000 types a second on one core (two generated corpora of 460,000
and 296,000 types: 4.9 s, measured on the development machine), so the section stays under about 3 s;
beyond, the page says so instead of keeping its request (and a server thread) busy for longer."""


LOG_RATIO_METHOD = (
    f"log2 of the ratio of per-token rates -+ {Z90:.3f} sqrt(1/count1 + 1/count2) / ln 2: the Wald interval on "
    "the log scale for the ratio of two Poisson rates; a word counted in one corpus only has no ratio (only_in)"
)


def _distinctive_refusal(corpora: list[Corpus]) -> str | None:
    """Why the distinctive words of this pair are not computed in a page, or None when they are."""
    without = [c.name for c in corpora if not store.source(c)["word_list"]]
    if without:
        return f"no distinctive words: {', '.join(without)} has no word list (made from a frequency spectrum)"
    types = [c.types for c in corpora]
    if sum(types) > DISTINCTIVE_MAX_TYPES:
        return (
            f"distinctive words are not computed in a page for corpora this large: {types[0]:,} + {types[1]:,} "
            f"types, more than the {DISTINCTIVE_MAX_TYPES:,} (about 3 s of computation) a page may take; "
            "compare the two word lists offline (each corpus page offers its words as CSV)"
        )
    return None


def _distinctive(engine: Engine, pair: tuple[int, int], min_freq: int, limit: int) -> dict[str, Any]:
    found = store.get_corpora(engine, list(pair))
    refusal = _distinctive_refusal([found[cid] for cid in pair])
    counts = [{}, {}] if refusal else [store.frequencies(engine, cid) for cid in memo.checked(pair)]
    memo.checkpoint()
    words = distinctive_words(counts[0], counts[1], min_freq) if all(counts) else []
    note = {"note": refusal} if refusal else {}
    return note | {
        "first": pair[0],
        "second": pair[1],
        "min_freq": min_freq,
        "limit": limit,
        "tested": len(words),
        "log_ratio_interval": {"level": LOG_RATIO_LEVEL, "method": LOG_RATIO_METHOD},
        "words": [
            {
                "word": w.word,
                "count1": w.count1,
                "count2": w.count2,
                "g2": _num(w.g2),
                "p": _num(w.p),
                "p_holm": _num(w.p_holm),
                "per_million1": _num(w.per_million1),
                "per_million2": _num(w.per_million2),
                "log_ratio": _num(w.log_ratio),
                "log_ratio_low": _num(w.log_ratio_low),
                "log_ratio_high": _num(w.log_ratio_high),
                "only_in": w.only_in,
            }
            for w in words[:limit]
        ],
    }


# ------------------------------------------------------------------------------------------- warnings


def _warnings(members: list[_Member], rows: list[dict[str, Any]], n0: int, horizon: int) -> list[dict]:
    out: list[dict[str, str]] = []
    profiles = {json.dumps(store.stored_fields(m.corpus)[0]["profile"], sort_keys=True) for m in members}
    if len(profiles) > 1:
        named = "; ".join(f"{m.corpus.name}: {m.corpus.profile_name}" for m in members)
        out.append(
            {
                "kind": "profiles",
                "message": "The corpora were tokenized with different tokenization profiles "
                f"({named}). Their counts of tokens and types are not directly comparable.",
            }
        )
    sources = {m.corpus.id: store.source(m.corpus) for m in members}
    if len({s["data"] for s in sources.values()}) > 1:
        named = "; ".join(f"{m.corpus.name}: {sources[m.corpus.id]['data']}" for m in members)
        out.append(
            {
                "kind": "sources",
                "message": "The corpora were made from different kinds of data "
                f"({named}). Statistics that need a word list or the order of a text are missing for some.",
            }
        )
    versions = {m.corpus.program_version for m in members}
    if len(versions) > 1:
        out.append(
            {
                "kind": "versions",
                "message": f"The corpora were counted by different program versions ({', '.join(sorted(versions))}).",
            }
        )
    for member, row in zip(members, rows, strict=True):
        corpus = member.corpus
        if member.text_order_damage:
            out.append({"kind": "damaged", "message": f"{corpus.name}: {member.text_order_damage}."})
        if corpus.tokens < MTLD_MIN_TOKENS:
            out.append(
                {
                    "kind": "small",
                    "message": f"{corpus.name} has only {corpus.tokens:,} tokens: MTLD is unreliable under "
                    f"{MTLD_MIN_TOKENS} tokens, and text segments (at least 50 tokens, two of them) are missing.",
                }
            )
        if row["hd_d"] is None:
            out.append(
                {
                    "kind": "small",
                    "message": f"HD-D needs at least {richness.HDD_DRAWS} tokens; {corpus.name} has {corpus.tokens:,}.",
                }
            )
        if row["basis"] == "model-based":
            factor = n0 / corpus.tokens
            text = (
                f"At {n0:,} tokens the values of {corpus.name} are model-based: the recommended model "
                f"extrapolates {factor:.1f}x beyond its {corpus.tokens:,} tokens."
            )
            if factor > EXTRAPOLATION_WARNING_FACTOR:
                text += f" Extrapolating more than {EXTRAPOLATION_WARNING_FACTOR}x is uncertain."
            out.append({"kind": "extrapolated", "message": text})
        elif row["basis"] == "unavailable":
            out.append({"kind": "model", "message": f"{corpus.name}: {row['method']}."})
        if member.model_failure is not None and row["basis"] != "unavailable":
            out.append(
                {
                    "kind": "model",
                    "message": f"No model curve for {corpus.name}: the models could not be fitted "
                    f"({member.model_failure}).",
                }
            )
    far = [m.corpus.name for m in members if horizon > EXTRAPOLATION_WARNING_FACTOR * m.corpus.tokens]
    if far:
        out.append(
            {
                "kind": "horizon",
                "message": f"The horizon of {horizon:,} tokens is more than {EXTRAPOLATION_WARNING_FACTOR}x the "
                f"size of {', '.join(far)}: those model curves are uncertain there.",
            }
        )
    return out


# ------------------------------------------------------------------------------------------ snapshots


def _corpora(engine: Engine, ids: tuple[int, ...]) -> list[Corpus]:
    found = store.get_corpora(engine, list(ids))
    missing = [i for i in ids if i not in found]
    if missing:
        raise CorpusNotFoundError(missing[0])
    return [found[i] for i in ids]


def _resolve(settings: ComparisonSettings, corpora: list[Corpus]) -> ComparisonSettings:
    smallest = min(c.tokens for c in corpora)
    largest = max(c.tokens for c in corpora)
    common = settings.common_size or smallest
    return ComparisonSettings(
        settings.corpora,
        common,
        settings.horizon or min(max(2 * largest, common), MAX_TOKENS),
        settings.pair or settings.corpora[:2],
        settings.min_freq,
        settings.limit,
    )


def build_snapshot(engine: Engine, settings: ComparisonSettings, corpora: list[Corpus]) -> dict[str, Any]:
    """Every number of the comparison page for resolved settings (see the module docstring)."""
    n0, horizon = settings.common_size, settings.horizon
    # each section checks first that someone still waits for it (a page whose client has gone stops)
    members = [_member(engine, c, max(n0, horizon)) for c in memo.checked(corpora)]
    rows = [_size_matched_row(m, n0) for m in memo.checked(members)]
    tests, untested = _tests(rows)
    random_order = [_random_order(engine, m.corpus) for m in memo.checked(members)]
    by_texts, text_warnings = text_comparisons.text_tests(engine, corpora, n0)
    memo.checkpoint()
    snapshot = {
        "kind": "lexigrowth comparison",
        "program_version": PROGRAM_VERSION,
        "computed_at": datetime.now(UTC).isoformat(),
        "settings": settings.as_dict(),
        "caution": CAUTION,
        "range_level": RANGE_LEVEL,
        "corpora": [_corpus_entry(c, i) for i, c in enumerate(corpora)],
        "warnings": _warnings(members, rows, n0, horizon)
        + [{"kind": "damaged", "message": damage} for _, damage in random_order if damage]
        + text_warnings,
        "size_matched": {"tokens": n0, "rows": rows, "tests": tests, "untested": untested} | by_texts,
        "spread": _spread(members, n0),
        "growth": [
            _growth(engine, m, horizon, curve)
            for m, (curve, _) in memo.checked(zip(members, random_order, strict=True))
        ],
        "legomena": _legomena(members, rows),
        "rank_frequency": [
            dict(zip(("ranks", "frequencies"), rank_frequency_points(m.spectrum), strict=True))
            | {"corpus_id": m.corpus.id}
            for m in members
        ],
    }
    memo.checkpoint()
    snapshot["distinctive"] = _distinctive(engine, settings.pair, settings.min_freq, settings.limit)
    snapshot["distinctive_texts"] = text_comparisons.distinctive_across_texts(engine, snapshot["distinctive"])
    return snapshot


_snapshots: RecentResults[dict[str, Any]] = RecentResults(CACHE_SIZE)


class LiveComparison(NamedTuple):
    """A live comparison before its snapshot is computed: the key of everything the snapshot depends on
    (store, program, settings with their defaults resolved, each corpus's identity, name, labels and
    model-report stamp), the resolved settings and the corpora."""

    key: tuple
    settings: ComparisonSettings
    corpora: list[Corpus]


def live_version(engine: Engine, settings: ComparisonSettings) -> LiveComparison:
    """The comparison of these settings on the current library, read from the store without computing it;
    raises CorpusNotFoundError for an unknown id and ComparisonInputError for unusable settings."""
    corpora = _corpora(engine, settings.corpora)
    resolved = _resolve(settings, corpora)
    stamps = modelling.report_stamps(engine, [c.id for c in corpora])
    key = (
        str(engine.url),
        modelling.CACHE_KEY,
        resolved,
        tuple(
            (c.id, c.content_hash, c.created_at.isoformat(), c.name, c.labels_json, stamps.get(c.id))
            for c in corpora
        ),
    )
    return LiveComparison(key, resolved, corpora)


def live_snapshot(engine: Engine, live: LiveComparison) -> dict[str, Any]:
    """The snapshot of ``live`` (kept in memory by its key)."""
    return _snapshots.get(live.key, lambda: build_snapshot(engine, live.settings, live.corpora))


def live_comparison(engine: Engine, settings: ComparisonSettings) -> dict[str, Any]:
    """The snapshot for these settings on the current library (``live_version``, then ``live_snapshot``)."""
    return live_snapshot(engine, live_version(engine, settings))


class NotAllowedError(PermissionError):
    """A lab member asked for something only the owner (or an admin) may do; the message says what."""


@dataclass(frozen=True)
class Publisher:
    """Who publishes: a lab member's id and role (``lab`` False outside lab mode, where anything goes)."""

    lab: bool = False
    member_id: int | None = None
    is_admin: bool = False

    def may_manage(self, creator_id: int | None) -> bool:
        """Unpublish or delete a saved comparison: its creator or an admin (anyone outside lab mode)."""
        return not self.lab or self.is_admin or (self.member_id is not None and self.member_id == creator_id)


def saved_identity(corpus: Corpus) -> dict[str, Any]:
    """What a saved comparison records of each corpus: id, owner, content hash and time of counting."""
    return {
        "id": corpus.id,
        "owner_id": corpus.owner_id,
        "content_hash": corpus.content_hash,
        "created_at": corpus.created_at.isoformat(),
    }


def check_publishable(engine: Engine, saved_corpora: list[dict[str, Any]], publisher: Publisher) -> None:
    """NotAllowedError unless every saved corpus (``saved_identity`` when saved) may be made public by
    ``publisher`` in lab mode: it must still be in the library as it was saved (same id, content hash and
    time of counting; not deleted, not replaced), and be the member's own, when saved and now (an admin:
    any member's)."""
    if not publisher.lab:
        return
    current = store.get_corpora(engine, [entry["id"] for entry in saved_corpora])
    gone, foreign = [], []
    for entry in saved_corpora:
        now = current.get(entry["id"])
        if now is None or saved_identity(now) | {"owner_id": entry["owner_id"]} != entry:
            gone.append(f"id {entry['id']}")
        elif not publisher.is_admin and not (
            publisher.member_id is not None and entry["owner_id"] == publisher.member_id == now.owner_id
        ):
            foreign.append(f"{now.name} (id {now.id})")
    if gone:
        raise NotAllowedError(
            "a comparison can be made public only while every corpus in it is in the library as it was "
            f"saved; deleted or replaced since: {', '.join(gone)}"
        )
    if foreign:
        raise NotAllowedError(
            f"only corpora you uploaded can be made public (or ask an admin); not yours: {', '.join(foreign)}"
        )


def _saved_corpora(engine: Engine, row: SavedComparison) -> list[dict[str, Any]]:
    """The corpora of a saved comparison as recorded when it was saved. A comparison saved before that
    record existed: the ids, content hashes and times of counting of its snapshot, each with the owner of
    the corpus that has that same identity now (an owner does not change; a replaced corpus has none)."""
    if row.corpora_json is not None:
        return json.loads(row.corpora_json)
    entries = [
        {key: entry[key] for key in ("id", "content_hash", "created_at")}
        for entry in json.loads(row.snapshot_json)["corpora"]
    ]
    current = store.get_corpora(engine, [entry["id"] for entry in entries])
    for entry in entries:
        now = current.get(entry["id"])
        same = now is not None and saved_identity(now) | {"owner_id": None} == entry | {"owner_id": None}
        entry["owner_id"] = now.owner_id if same else None
    return entries


def save(
    engine: Engine, settings: ComparisonSettings, publisher: Publisher = Publisher(), public: bool = False
) -> str:
    """Store the live snapshot of these settings under a new unguessable slug, with each corpus as it is now
    (``saved_identity``); returns the slug. ``publisher`` is who saves it (its creator in lab mode), and
    ``public`` lets anyone with the link see it without words: NotAllowedError (nothing stored) unless
    ``check_publishable`` allows it."""
    live = live_version(engine, settings)
    record = [saved_identity(c) for c in live.corpora]
    if public:
        check_publishable(engine, record, publisher)
    snapshot = live_snapshot(engine, live)
    row = saved.save_comparison(
        engine,
        list(settings.corpora),
        snapshot["settings"],
        snapshot,
        snapshot["program_version"],
        creator_id=publisher.member_id,
        corpora=record,
        public=public,
    )
    return row.slug


def permalink(slug: str) -> str:
    return f"/compare/{slug}"


def saved_comparison(engine: Engine, slug: str) -> dict[str, Any]:
    """The stored snapshot of a permalink with notices for corpora deleted (or replaced) since it was saved;
    raises ComparisonNotFoundError for an unknown slug."""
    row = saved.get_comparison(engine, slug)
    snapshot = json.loads(row.snapshot_json)
    current = store.get_corpora(engine, [c["id"] for c in snapshot["corpora"]])
    notices = []
    for entry in snapshot["corpora"]:
        now = current.get(entry["id"])
        entry["available"] = bool(now) and (now.content_hash, store.summary(now)["created_at"]) == (
            entry["content_hash"],
            entry["created_at"],
        )
        if not entry["available"]:
            notices.append(
                f"The corpus {entry['name']} (id {entry['id']}) has been deleted from the library since this "
                "comparison was saved. The numbers below are the ones saved then."
            )
    return snapshot | {
        "slug": row.slug,
        "url": permalink(row.slug),
        "saved_at": row.created_at.isoformat(),
        "notices": notices,
        "public": row.public,
    }


def set_visibility(engine: Engine, slug: str, public: bool, publisher: Publisher) -> None:
    """Make a saved comparison public or members-only: its creator or an admin (publishing again needs
    ``check_publishable`` too); NotAllowedError or ComparisonNotFoundError otherwise."""
    row = saved.get_comparison(engine, slug)
    if not publisher.may_manage(row.creator_id):
        raise NotAllowedError(
            "only the member who saved this comparison, or an admin, may change who sees it"
        )
    if public:
        check_publishable(engine, _saved_corpora(engine, row), publisher)
    saved.set_public(engine, slug, public)


def delete_saved(engine: Engine, slug: str, publisher: Publisher) -> None:
    """Delete a saved comparison: its creator or an admin; NotAllowedError or ComparisonNotFoundError."""
    if not publisher.may_manage(saved.creator_of(engine, slug)):
        raise NotAllowedError("only the member who saved this comparison, or an admin, may delete it")
    saved.delete_comparison(engine, slug)


def is_public(engine: Engine, slug: str) -> bool:
    """Whether the saved comparison at this address may be opened without signing in."""
    return saved.is_public(engine, slug)


def may_manage(engine: Engine, slug: str, publisher: Publisher) -> bool:
    return publisher.may_manage(saved.creator_of(engine, slug))


def without_word_lists(snapshot: dict[str, Any]) -> dict[str, Any]:
    """The snapshot as a visitor who is not signed in sees a public permalink: every number and curve, but
    no word (the distinctive words are emptied and marked hidden; counts of words tested stay) and no
    content hash (the SHA-256 of a corpus's text would let anyone confirm a guess of that text)."""
    corpora = [{k: v for k, v in c.items() if k != "content_hash"} for c in snapshot["corpora"]]
    return (
        snapshot
        | {
            "corpora": corpora,
            "distinctive": snapshot["distinctive"] | {"words": [], "words_hidden": True},
        }
        | (
            {"distinctive_texts": snapshot["distinctive_texts"] | {"words": [], "words_hidden": True}}
            if "distinctive_texts" in snapshot
            else {}
        )
    )


# ------------------------------------------------------------------------------------------ downloads


def size_matched_csv(snapshot: dict[str, Any]) -> str:
    """The size-matched table as CSV with the JSON field names as columns."""
    rows = snapshot["size_matched"]["rows"]
    return table_text(TABLE_COLUMNS, [[r.get(c) for c in TABLE_COLUMNS] for r in rows])


def distinctive_csv(snapshot: dict[str, Any]) -> str:
    """The distinctive words of the snapshot's pair as CSV (count1 = first corpus, count2 = second)."""
    words = snapshot["distinctive"]["words"]
    return table_text(DISTINCTIVE_COLUMNS, [[w.get(c) for c in DISTINCTIVE_COLUMNS] for w in words])
