"""Everything the Corpus page shows, gathered from the services (cached fits; nothing is fitted here)."""

from __future__ import annotations

import logging
from collections.abc import Callable
from datetime import datetime
from typing import Any, NamedTuple

from sqlalchemy.engine import Engine

from app.core import planning
from app.core.spectrum import Spectrum
from app.services import corpora, memo, modelling
from app.services.corpora import StoredCorpus
from app.services.memo import RecentResults
from app.services.texts import word_dispersion
from app.web import figures

log = logging.getLogger("lexigrowth.pages")

STORED_DATA_ERRORS = (ValueError, TypeError, KeyError, IndexError, ArithmeticError)
"""What computing a section from rows no version of this program writes (edited by hand, or left by
another program) raises: that section is replaced by a message, the rest of the page is shown."""
DAMAGED = (
    "This section cannot be shown: the data stored for it is damaged ({reason}). Everything else on this "
    "page is unaffected; uploading the corpus again repairs it."
)


WORDS_PER_PAGE = 50
INDEX_NAMES = {
    "ttr": "TTR (V/N)",
    "guiraud_r": "Guiraud's R",
    "herdan_c": "Herdan's C",
    "dugast_u": "Dugast's U",
    "maas_a2": "Maas a²",
    "honore_h": "Honoré's H",
    "sichel_s": "Sichel's S",
    "brunet_w": "Brunet's W",
    "yule_k": "Yule's K",
    "simpson_d": "Simpson's D",
    "hd_d": "HD-D",
    "mattr": "MATTR (window 50)",
    "mtld": "MTLD",
}


def parse_sizes(text: str | None, tokens: int) -> list[int]:
    """Sizes typed by the user ("10000, 1e6, 2x, 10x"): plain numbers or multiples of the corpus size."""
    if not text:
        return sorted({max(1, tokens // 10), max(1, tokens // 2), tokens, 2 * tokens, 10 * tokens})
    sizes = set()
    for part in text.replace(";", ",").split(","):
        part = part.strip().lower().replace("_", "")
        if not part:
            continue
        try:
            value = float(part[:-1]) * tokens if part.endswith("x") else float(part)
        except ValueError as exc:
            raise ValueError(
                f"sizes: {part!r} is neither a number of tokens nor a multiple like '10x'"
            ) from exc
        if not 1 <= value <= modelling.MAX_PREDICTION_TOKENS:
            raise ValueError(f"sizes: {part!r} is outside 1 .. {modelling.MAX_PREDICTION_TOKENS:,} tokens")
        sizes.add(int(round(value)))
    if len(sizes) > 30:
        raise ValueError("sizes: at most 30 sizes at once")
    return sorted(sizes)


def backtest_column(kind: str, label: str) -> tuple[str, str]:
    """A backtest's column heading in words and its tooltip: ("from a random 10%", "Fitted on ...")."""
    if kind == "random":
        share = f"{float(label):.0%}"
        return (
            f"from a random {share}",
            f"Fitted on random samples of {share} of the tokens, then asked for the types of the whole "
            "corpus: median signed error of that prediction (+ = too many types).",
        )
    share = label.removeprefix("first ").strip()
    return (
        f"from the first {share}",
        f"Fitted on the first {share} of the text as written, then asked for the types of the whole "
        "corpus: signed error of that prediction (+ = too many types).",
    )


BACKTEST_NOT_RUN = "not run: this model was not fitted to this part of the text"


def _backtest_table(report: dict) -> tuple[dict[str, dict[str, float | str]], dict[str, str]]:
    """model -> {column heading: signed error of V in %, or why there is none}, and each heading's tooltip.
    A heading a model has no row for was not run for it (``BACKTEST_NOT_RUN``)."""
    table: dict[str, dict[str, float | str]] = {}
    tips: dict[str, str] = {}
    for row in report["summary"]:
        heading, tip = backtest_column(row["kind"], row["label"])
        tips[heading] = tip
        error = row["types_error_percent"]
        table.setdefault(row["model"], {})[heading] = (
            error
            if error is not None
            else f"failed: the model could not be fitted to the part in any of its {row['runs']:,} runs"
        )
    return table, tips


def fit_note(tokens: int, rows: list[dict[str, Any]]) -> str:
    """A plain sentence on what the goodness-of-fit p-values mean at this corpus size."""
    p_values = [r["gof"]["p_value"] for r in rows if r["gof"].get("p_value") is not None]
    if p_values and max(p_values) < 0.01 and tokens >= 10_000:
        return (
            f"At {tokens:,} tokens the test sees differences far too small to matter, so every p-value is tiny, "
            "the recommended model's included: no formula describes a real text exactly. Read the misfit (the "
            "share of types the model puts in another frequency class) and the backtest errors instead; a "
            "misfit of a few per cent is a good fit."
        )
    if p_values and max(p_values) < 0.01:
        return (
            "Every p-value is small: the observed spectrum differs from each model beyond sampling noise. "
            "Read the misfit and the backtest errors to judge by how much."
        )
    return (
        "A p-value above 0.05 says the spectrum is consistent with the model at this size; the misfit says by "
        "how much the expected spectrum differs, whatever the size."
    )


def model_section(
    engine: Engine, corpus_id: int, tokens: int, horizon: int, sizes: list[int]
) -> dict[str, Any]:
    """Model table, prediction table and the model curves for the figures (or the reason there are none)."""
    try:
        report = modelling.model_report(engine, corpus_id)
        loaded = modelling.load_models(engine, corpus_id)
        predictors = loaded.predictors
    except modelling.ModelsPendingError:
        return {"models_error": None, "models_pending": "queued"}
    except modelling.ModelsFailedError as exc:  # the page says "No vocabulary model could be fitted" itself
        return {"models_error": exc.reason}
    except STORED_DATA_ERRORS as exc:
        return {"models_error": str(exc)}
    backtests, backtest_tips = _backtest_table(report)
    weights = report["recommended"]["weights"]
    misfit = modelling.misfits(loaded)
    # Parameters as checked by the core: a degenerate fit shows its reason instead of its end point.
    degenerate = {name: predictors[name].degenerate for name in report["fitted"]}
    rows = [
        {
            "name": name,
            "title": data["title"],
            "params": None if degenerate[name] else data["params"],
            "not_applicable": degenerate[name] and f"degenerate fit: {degenerate[name]}",
            "gof": data["goodness_of_fit"],
            "backtests": backtests.get(name, {}),
            "weight": weights.get(name, {}).get("types"),
            "legomena_weight": weights.get(name, {}).get("legomena"),
            "misfit": misfit.get(name),
        }
        for name, data in report["fitted"].items()
    ]
    columns = list(dict.fromkeys(label for row in rows for label in row["backtests"]))
    shown = [n for n in predictors if n != "perfect_zipf_totals" and not degenerate.get(n)]
    continued, not_continued = modelling.continuations(loaded, horizon)
    curves = {
        name: (curve["tokens"], curve["types"])
        for name, curve in continued.items()
        if name != "perfect_zipf_totals"
    }
    rec = continued.get("recommended")
    rec_band = (rec["tokens"], rec["types_low"], rec["types_high"]) if rec else None
    predictions = [
        {
            "tokens": n,
            "extrapolated": n > tokens,
            # at or below N every model predicts the exact interpolation: it is computed once
            "models": {
                name: modelling.predict(engine, corpus_id, n, name, loaded)
                for name in ("recommended", *(report["fitted"] if n > tokens else ()))
            },
        }
        for n in memo.checked(sizes)  # each size costs every model's prediction: stop for nobody
    ]
    return {
        "models_error": None,
        "models_pending": None,
        "model_rows": rows,
        "backtest_columns": columns,
        "backtest_tips": backtest_tips,
        "backtest_not_run": BACKTEST_NOT_RUN,
        "fit_note": fit_note(tokens, rows),
        "model_titles": modelling.model_titles(),
        "failures": report["failures"],
        "recommended_band": report["recommended"]["band"],
        "weight_rule": report["recommended"]["rule"],
        "curves": curves,
        "not_continued": not_continued,
        "recommended_curve_band": rec_band,
        "expected_at_corpus_size": {name: predictors[name].spectrum(tokens, 20).tolist() for name in shown},
        "predictions": predictions,
    }


PLAN_LABELS = {
    "types": "types",
    "new_type_rate": "new-type rate",
    "coverage": "coverage",
    "share": "share of the population",
}


def plan_section(
    engine: Engine, corpus_id: int, target: planning.Target | None, model: str
) -> dict[str, Any]:
    """The planning answer (or why there is none) for the Planning panel."""
    if target is None:
        return {"plan": None, "plan_error": None}
    try:
        return {"plan": modelling.plan(engine, corpus_id, target, model), "plan_error": None}
    except STORED_DATA_ERRORS as exc:
        return {"plan": None, "plan_error": str(exc)}


PAGE_VIEWS: RecentResults[dict[str, Any]] = RecentResults(32)
"""The Corpus page's derived part (tables, figures, predictions) by corpus, model-report stamp and the
page's settings: a page asked for again is assembled, not recomputed."""


class ViewVersion(NamedTuple):
    """What the Corpus page's figures and tables depend on besides its settings."""

    store: str
    program: str
    corpus_id: int
    content_hash: str
    counted_at: datetime
    report_stamp: tuple[str, bool] | None  # None while the model report is being computed


def view_version(engine: Engine, corpus: StoredCorpus) -> ViewVersion:
    stamp = modelling.report_stamps(engine, [corpus.id]).get(corpus.id)
    return ViewVersion(
        str(engine.url), modelling.CACHE_KEY, corpus.id, corpus.content_hash, corpus.created_at, stamp
    )


def corpus_context(
    engine: Engine,
    corpus: StoredCorpus,
    version: ViewVersion,
    q: str | None,
    page: int,
    sizes_text: str | None,
    horizon_factor: float,
    common_size: int | None,
    target: planning.Target | None = None,
    plan_model: str = "recommended",
) -> dict[str, Any]:
    """Everything the Corpus page shows. The name and labels are read each time (they can be edited); the
    rest depends only on ``version`` (``view_version``) and the settings, and is kept in PAGE_VIEWS."""
    settings = (q, page, sizes_text, horizon_factor, common_size, target, plan_model)
    derived = PAGE_VIEWS.get((version, settings), lambda: _derived_context(engine, corpus, *settings))
    return {"corpus": corpora.summary(corpus)} | derived


def _section(damaged: dict[str, str], name: str, compute: Callable[[], Any], fallback: Any) -> Any:
    """``compute()``, or ``fallback`` with the reason recorded in ``damaged[name]`` when the stored data it
    reads is damaged (``STORED_DATA_ERRORS``). Before it: stop if everyone who asked for this page has gone."""
    memo.checkpoint()
    try:
        return compute()
    except STORED_DATA_ERRORS as exc:
        log.warning("corpus page section %r not shown: %s: %s", name, exc.__class__.__name__, exc)
        damaged[name] = DAMAGED.format(reason=f"{exc.__class__.__name__}: {str(exc)[:200]}")
        return fallback


def _derived_context(
    engine: Engine,
    corpus: StoredCorpus,
    q: str | None,
    page: int,
    sizes_text: str | None,
    horizon_factor: float,
    common_size: int | None,
    target: planning.Target | None,
    plan_model: str,
) -> dict[str, Any]:
    corpus_id = corpus.id
    tokens = corpus.tokens
    damaged: dict[str, str] = {}
    pairs = corpora.spectrum(engine, corpus_id)
    sizes = parse_sizes(sizes_text, tokens)
    planned = plan_section(engine, corpus_id, target, plan_model)
    memo.checkpoint()  # between the sections: stop if everyone who asked for this page has gone
    horizon = int(max(tokens * horizon_factor, tokens + 1))
    marker = None
    if planned["plan"]:
        answer = planned["plan"]["tokens"]
        horizon = int(min(max(horizon, 1.25 * answer), 1000 * tokens))
        if answer <= horizon:
            marker = (answer, f"target reached: {answer:,.0f} tokens")
    models = model_section(engine, corpus_id, tokens, horizon, sizes)
    memo.checkpoint()

    def spectrum_section() -> dict[str, Any]:
        dense = dict(Spectrum.from_pairs(pairs).pairs())
        return {
            "spectrum_rows": [(m, dense.get(m, 0)) for m in range(1, 21)],
            "spectrum_figure": figures.spectrum_bars(pairs, models.get("expected_at_corpus_size")),
            "rank_figure": figures.rank_frequency(pairs),
        }

    def growth_section() -> dict[str, Any]:
        return {
            "growth_figure": figures.growth_lines(
                corpora.text_order_growth(engine, corpus_id),
                modelling.random_order_growth(engine, corpus_id)["points"],
                models.get("curves"),
                models.get("recommended_curve_band"),
                tokens,
                marker,
            )
        }

    common = common_size or min(tokens, 10_000)
    total_words, word_rows = corpora.word_counts(
        engine, corpus_id, q, WORDS_PER_PAGE, (page - 1) * WORDS_PER_PAGE
    )
    richness = _section(
        damaged, "richness", lambda: modelling.richness(engine, corpus_id, min(common, tokens)), None
    )
    if richness and richness.get("text_order_damaged"):
        damaged["text_order"] = DAMAGED.format(reason=richness["text_order_damaged"])
    return (
        {
            "damaged": damaged,
            **_section(
                damaged,
                "spectrum",
                spectrum_section,
                {"spectrum_rows": [], "spectrum_figure": None, "rank_figure": None},
            ),
            **_section(damaged, "growth", growth_section, {"growth_figure": None}),
            "sizes_text": sizes_text or "",
            "horizon_factor": horizon_factor,
            "horizon": horizon,
            "richness": richness,
            "index_names": INDEX_NAMES,
            "unseen": _section(damaged, "unseen", lambda: modelling.unseen_vocabulary(engine, corpus_id), []),
            "words": word_rows,
            "words_total": total_words,
            "words_dispersion": _section(
                damaged,
                "dispersion",
                lambda: word_dispersion(engine, corpus, [w for w, _ in word_rows]),
                None,
            ),
            "words_query": q or "",
            "words_page": page,
            "words_pages": max(1, -(-total_words // WORDS_PER_PAGE)),
            "json_url": f"/api/corpora/{corpus_id}",
            "small_warning": modelling.small_corpus_warning(tokens, corpus.types),
            "plan_target": target,
            "plan_marked": marker is not None,
            "plan_model": plan_model,
            "plan_labels": PLAN_LABELS,
        }
        | models
        | planned
    )
