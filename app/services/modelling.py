"""Modelling service: spectra from the store in, cached numbers out (the maths lives in app.core).

Fits and backtests are computed once per corpus and cached in the store under a fingerprint of the code
that computes them (``CACHE_KEY``); predictors are rebuilt from the cached parameters, so pages render
without fitting anything.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Iterable
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

import numpy as np
import scipy
from sqlalchemy.engine import Engine

from app import core as core_package
from app.config import PROGRAM_VERSION
from app.core import planning, unseen
from app.core import richness as richness_core
from app.core.anchored import Anchored
from app.core.backtest import Ensemble, backtest
from app.core.interpolation import expected_spectrum, growth_band, types_band
from app.core.models import MODELS, ErrorBand, FittedModel, Predictor
from app.core.models.base import RANGE_LEVEL, RANGE_METHOD, Z90
from app.core.models.goodness import spectrum_misfit
from app.core.spectrum import Spectrum
from app.core.validity import RANGE_BOUNDS, checked_prediction, range_within_possible
from app.ingest import counts
from app.store import corpora as store
from app.store.tables import Corpus

RANDOM_GROWTH_POINTS = 60
LEGOMENA_SHOWN = 20
SAMPLE = "sample"
RECOMMENDED = "recommended"
MODEL_NAMES = (SAMPLE, *MODELS, RECOMMENDED)
PLAN_MODELS = (RECOMMENDED, *MODELS)
MAX_PREDICTION_TOKENS = 10**12
MODELLING_SOURCES = (Path(core_package.__file__).parent, Path(__file__))
"""The code that computes cached results: the maths core (every module under ``app/core``) and this
service (its settings: sizes, points, levels)."""


def code_fingerprint(sources: Iterable[Path]) -> str:
    """SHA-256 over the Python sources under ``sources`` (files, or folders searched recursively), each
    with its path relative to its root, in a fixed order, and over the NumPy and SciPy versions; the
    first 16 hexadecimal digits. Any change to the code that computes a result, or to the libraries it
    calls, gives another fingerprint."""
    digest = hashlib.sha256(f"numpy {np.__version__} scipy {scipy.__version__}".encode())
    for source in sources:
        files = sorted(source.rglob("*.py")) if source.is_dir() else [source]
        for file in files:
            name = file.relative_to(source if source.is_dir() else source.parent).as_posix()
            digest.update(f"\0{name}\0".encode())
            digest.update(file.read_bytes())
    return digest.hexdigest()[:16]


CACHE_KEY = f"{PROGRAM_VERSION}+code-{code_fingerprint(MODELLING_SOURCES)}"
"""The key of every cached result (model reports, random-order growth, richness...): results computed by
other code are never read back, and their tasks run again (their dedupe key holds it too)."""
SMALL_CORPUS_TOKENS = 1_000
"""Below this many tokens a spectrum holds too few repeated types for any extrapolation to be trusted (a
rule of thumb of ours: backtests on texts of a few hundred tokens miss by tens of per cent)."""
SMALL_CORPUS_TYPES = 100
"""Fewer types than this leave a spectrum of a few frequency classes, too few to fit a model with two or three
parameters and test it (a rule of thumb of ours, like the tokens' one)."""


def small_corpus_warning(tokens: int, types: int) -> str | None:
    """The warning shown before any extrapolation of a text under SMALL_CORPUS_TOKENS tokens or with fewer
    than SMALL_CORPUS_TYPES types (a short word list repeated many times has many tokens and almost no
    spectrum), else None."""
    if tokens < SMALL_CORPUS_TOKENS:
        size = f"only {tokens:,} tokens (fewer than {SMALL_CORPUS_TOKENS:,})"
    elif types < SMALL_CORPUS_TYPES:
        size = f"only {types:,} different words (types; fewer than {SMALL_CORPUS_TYPES:,})"
    else:
        return None
    return (
        f"This text has {size}: its spectrum holds too few repeated words for models to be trusted. Treat "
        "every extrapolation beyond its own size as a rough guess; the exact interpolation up to its size "
        "still holds."
    )


class PredictionError(ValueError):
    """A prediction that cannot be made (unknown model, size out of range); the message says why."""


def load_spectrum(engine: Engine, corpus_id: int) -> Spectrum:
    store.get_corpus(engine, corpus_id)
    return Spectrum.from_pairs(store.spectrum_pairs(engine, corpus_id))


def cached(engine: Engine, corpus_id: int, kind: str, compute) -> dict:
    """Return the cached result of ``kind`` for this program version and code fingerprint (``CACHE_KEY``),
    computing and storing it if absent."""
    payload = store.cached_result(engine, corpus_id, kind, CACHE_KEY)
    if payload is None:
        payload = compute()
        store.store_cached_result(engine, corpus_id, kind, CACHE_KEY, payload)
    return payload


def growth_sizes(tokens: int, points: int) -> np.ndarray:
    """Sizes for curves: log-spaced and linear-spaced points between 1 and ``tokens``."""
    if tokens < 1:
        return np.array([], dtype=np.int64)
    half = max(points // 2, 2)
    sizes = np.concatenate([np.geomspace(1, tokens, half), np.linspace(1, tokens, half)])
    return np.unique(np.clip(np.rint(sizes), 1, tokens).astype(np.int64))


RANDOM_ORDER_GROWTH = "random_order_growth"


def random_order_growth_of(spectrum: Spectrum) -> dict:
    """Expected type growth of random samples with its nominal 90% range (exact hypergeometric) of a
    spectrum: the exact interpolation, which ``predict`` gives for every model up to the corpus size (the range
    kept within the types a sample of n tokens can hold, as there)."""
    points = []
    for band in growth_band(spectrum, growth_sizes(spectrum.tokens, RANDOM_GROWTH_POINTS)):
        low, high = range_within_possible(band.tokens, *band.limits(Z90), spectrum.tokens, spectrum.types)
        points.append(
            {
                "tokens": band.tokens,
                "types": band.types,
                "sd": band.sd,
                "low": float(low),
                "high": float(high),
            }
        )
    return {
        "method": "exact hypergeometric expectation over random samples without replacement",
        "range": {"level": RANGE_LEVEL, "method": INTERPOLATION_RANGE},
        "points": points,
    }


def exact_statistics(pairs: list[tuple[int, int]]) -> dict[str, dict]:
    """The results a new corpus is stored with (result kind -> payload), computed from its spectrum before
    it is stored, so that a corpus whose statistics cannot be computed is never stored. Their cost is
    bounded by the limits on what is accepted (``app.ingest.counts``: largest frequency, spectrum rows)."""
    return {RANDOM_ORDER_GROWTH: random_order_growth_of(Spectrum.from_pairs(pairs))}


def random_order_growth(engine: Engine, corpus_id: int) -> dict:
    """The random-order growth with its band, cached (stored with the corpus; computed here only for a
    corpus stored by an older version)."""
    return cached(
        engine,
        corpus_id,
        RANDOM_ORDER_GROWTH,
        lambda: random_order_growth_of(load_spectrum(engine, corpus_id)),
    )


# ---------------------------------------------------------------------------------------------- models


def _prefix_spectra(engine: Engine, corpus_id: int) -> dict[str, Spectrum]:
    return {
        f"first {float(share):.0%}": Spectrum.from_pairs(pairs)
        for share, (_, pairs) in sorted(
            store.prefix_spectra(engine, corpus_id).items(), key=lambda kv: float(kv[0])
        )
        if pairs
    }


class ModelsPendingError(PredictionError):
    """The corpus's models are not fitted yet: their task is queued or running (``task`` says which)."""

    def __init__(self, corpus_id: int) -> None:
        super().__init__(
            f"the models of corpus {corpus_id} are being computed; the exact statistics are ready, "
            "try the models again in a few seconds"
        )
        self.corpus_id = corpus_id


class ModelsFailedError(PredictionError):
    """No model could be fitted to the corpus (its stored report records why): ``reason`` is that record."""

    def __init__(self, reason: str) -> None:
        super().__init__(f"no vocabulary model could be fitted to this corpus: {reason}")
        self.reason = reason


MODELS_KIND = "models"


def compute_model_report(engine: Engine, corpus_id: int) -> dict[str, Any]:
    """Fit every model at full size with goodness of fit, the backtests and the recommended ensemble, and
    cache the report; when no model can be fitted, cache the reason instead, so that it is never tried
    again by this code (``CACHE_KEY``). Heavy: run it as a background task, never in a page request."""
    spectrum = load_spectrum(engine, corpus_id)
    try:
        payload = backtest(spectrum, _prefix_spectra(engine, corpus_id)).as_dict()
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
        payload = {"error": str(exc) or exc.__class__.__name__}
    store.store_cached_result(engine, corpus_id, MODELS_KIND, CACHE_KEY, payload)
    return payload


def warm_up() -> None:
    """Run the model report once on a small invented spectrum (about 300 tokens of a Zipf-like design), so
    that a worker's first draft does not pay for the numerical libraries' first calls."""
    backtest(Spectrum.from_frequencies(np.maximum(1, (60 / np.arange(1, 200)).astype(np.int64))))


def report_stamps(engine: Engine, corpus_ids: Iterable[int]) -> dict[int, tuple[str, bool]]:
    """For each corpus whose model report of this program version and code fingerprint is stored: when it
    was stored and whether it records a failure (read without parsing the report). Absent: pending."""
    return store.cached_result_stamps(engine, corpus_ids, MODELS_KIND, CACHE_KEY)


def has_model_report(engine: Engine, corpus_id: int) -> bool:
    """Whether the model report of this program version and code fingerprint is stored."""
    return corpus_id in report_stamps(engine, [corpus_id])


def model_report(engine: Engine, corpus_id: int) -> dict[str, Any]:
    """The cached model report. Raises ModelsPendingError until its task has computed it (the caller says
    so, and makes sure the task is queued), PredictionError with the reason when no model could be fitted."""
    payload = store.cached_result(engine, corpus_id, MODELS_KIND, CACHE_KEY)
    if payload is None:
        raise ModelsPendingError(corpus_id)
    if "error" in payload:
        raise ModelsFailedError(payload["error"])
    return payload


def _band(data: dict | None) -> ErrorBand | None:
    return ErrorBand.from_dict(data)


def _fitted(data: dict) -> FittedModel:
    params = {**data["params"], **data.get("arrays", {})}
    return FittedModel(MODELS[data["model"]], params, int(data["tokens"]), band=_band(data["band"]))


def predictors(engine: Engine, corpus_id: int) -> dict[str, Predictor]:
    """Fitted models and the recommended ensemble, rebuilt from the cached report."""
    report = model_report(engine, corpus_id)
    fitted = {name: _fitted(data) for name, data in report["fitted"].items()}
    rec = report["recommended"]
    members = tuple(fitted[name] for name in rec["weights"])
    fitted[RECOMMENDED] = Ensemble(
        members,
        tuple(w["types"] for w in rec["weights"].values()),
        tuple(w["legomena"] for w in rec["weights"].values()),
        int(rec["tokens"]),
        _band(rec["band"]),
    )
    return fitted


def _legomena(values: np.ndarray) -> dict[str, float]:
    return {str(k): float(v) for k, v in enumerate(values, start=1)}


@dataclass(frozen=True)
class LoadedModels:
    """A corpus's spectrum and rebuilt predictors, loaded once for many predictions (one page)."""

    tokens: int
    spectrum: Spectrum
    predictors: dict[str, Predictor]
    failures: dict[str, str]


def model_titles() -> dict[str, str]:
    """Every model id the API knows, with its name in words."""
    return (
        {SAMPLE: "exact random-sample interpolation"}
        | {name: model.title for name, model in MODELS.items()}
        | {RECOMMENDED: "recommended model"}
    )


def model_catalogue() -> list[dict[str, Any]]:
    """GET /api/models: every model id with its name in words, formula and parameters."""
    out = [
        {
            "id": SAMPLE,
            "name": "exact random-sample interpolation",
            "formula": "E[V(n)] = sum_m V_m (1 - C(N - m, n) / C(N, n)) for n <= N (hypergeometric)",
            "parameters": [],
            "extrapolates": False,
        }
    ]
    for name, model in MODELS.items():
        out.append(
            {
                "id": name,
                "name": model.title,
                "formula": model.formula,
                "parameters": [
                    {"name": p, "meaning": model.parameter_meanings[p]} for p in model.parameter_names
                ],
                "finite_population": model.finite_population,
                "extrapolates": True,
            }
        )
    out.append(
        {
            "id": RECOMMENDED,
            "name": "recommended model",
            "formula": "sample up to N; beyond N a weighted mean of the fitted models, weights from backtests",
            "parameters": [],
            "extrapolates": True,
        }
    )
    return out


def misfits(loaded: LoadedModels, m_max: int = 15) -> dict[str, float]:
    """Each fitted model's spectrum misfit at the corpus size (share of types in another frequency class
    than observed, m = 1..m_max): an effect size to read beside the goodness-of-fit p-value."""
    observed = loaded.spectrum.dense(m_max)
    return {
        name: spectrum_misfit(observed, predictor.spectrum(loaded.tokens, m_max), loaded.spectrum.types)
        for name, predictor in loaded.predictors.items()
        if name != RECOMMENDED
    }


def load_models(engine: Engine, corpus_id: int) -> LoadedModels:
    spectrum = load_spectrum(engine, corpus_id)
    failures = model_report(engine, corpus_id)["failures"]
    return LoadedModels(spectrum.tokens, spectrum, predictors(engine, corpus_id), failures)


def predict(
    engine: Engine, corpus_id: int, tokens: int, model: str = RECOMMENDED, loaded: LoadedModels | None = None
) -> dict[str, Any]:
    """E[V(n)] with its nominal 90% range and E[V_k(n)], k = 1..20, by one model.

    At or below the corpus size N every model answers with the exact random-sample interpolation
    (hypergeometric; the corpus itself is the best model of its own samples), beyond N with the model
    anchored at the observed V (``app.core.anchored``); planning inverts exactly this. ``sample`` covers
    n <= N only. Every prediction passes the rules of ``app.core.validity.checked_prediction``: one that
    breaks them (a degenerate fit beyond N, fewer types than the corpus holds, more legomena than types...)
    comes with ``not_applicable`` giving the reason and null numbers, else ``not_applicable`` is null.
    ``loaded`` saves reloading the corpus's models when a page asks for many predictions.
    """
    if model not in MODEL_NAMES:
        raise PredictionError(f"unknown model {model!r}; known: {', '.join(MODEL_NAMES)}")
    if not 1 <= tokens <= MAX_PREDICTION_TOKENS:
        raise PredictionError(f"tokens must lie between 1 and {MAX_PREDICTION_TOKENS:,}")
    spectrum = load_spectrum(engine, corpus_id) if loaded is None else loaded.spectrum
    extrapolated = tokens > spectrum.tokens
    if model == SAMPLE and extrapolated:
        raise PredictionError(
            f"the 'sample' interpolation covers sizes up to the corpus size {spectrum.tokens:,}; "
            "choose a model to extrapolate"
        )
    anchored = _anchored(engine, corpus_id, model, spectrum, loaded)
    checked = checked_prediction(anchored, tokens, LEGOMENA_SHOWN)
    out = {
        "tokens": tokens,
        "model": model,
        "method": INTERPOLATION_METHOD if not extrapolated else anchored.predictor.title,
        "extrapolated": extrapolated,
        "types": checked.types,
        "types_low": checked.types_low,
        "types_high": checked.types_high,
        "range": {
            "level": RANGE_LEVEL,
            "method": f"{INTERPOLATION_RANGE if not extrapolated else RANGE_METHOD}; {RANGE_BOUNDS}",
        },
        "legomena": None if checked.legomena is None else _legomena(checked.legomena),
        "not_applicable": checked.not_applicable,
    }
    sd = anchored.types_sd(tokens)
    if sd is not None:
        out["types_sd"] = sd
    return out


CONTINUATION_POINTS = 60
"""Sizes from the corpus size to the horizon at which ``continuations`` gives every model's prediction."""


def continuations(loaded: LoadedModels, horizon: int) -> tuple[dict[str, dict[str, list]], dict[str, str]]:
    """Every model's prediction as ``predict`` serves it (the model continued from the corpus:
    ``app.core.anchored``) at CONTINUATION_POINTS log-spaced sizes from the corpus size N to ``horizon``:
    model -> {"tokens", "types", "types_low", "types_high"} (the nominal 90% range), and the reason for each
    model that cannot be continued (a degenerate fit among them: ``FittedModel.degenerate``). The growth plot
    draws the models there only: at or below N every model predicts the exact random-sample interpolation,
    which is drawn once, as the random-order expectation."""
    N = loaded.tokens
    sizes = np.unique(np.rint(np.geomspace(N, max(horizon, N + 1), CONTINUATION_POINTS)).astype(np.int64))
    x = sizes.astype(float)
    curves: dict[str, dict[str, list]] = {}
    failures: dict[str, str] = {}
    for name, predictor in loaded.predictors.items():
        if degenerate := getattr(predictor, "degenerate", None):
            failures[name] = f"its fit is degenerate: {degenerate}"
            continue
        anchored = Anchored(predictor, loaded.spectrum)
        try:
            values = (anchored.types(x), anchored.types_low(x), anchored.types_high(x))
        except (ValueError, ArithmeticError) as exc:
            failures[name] = str(exc) or type(exc).__name__
            continue
        curves[name] = {"tokens": sizes.tolist()} | {
            key: np.asarray(v, dtype=float).tolist()
            for key, v in zip(("types", "types_low", "types_high"), values, strict=True)
        }
    return curves, failures


INTERPOLATION_METHOD = "exact random-sample interpolation (hypergeometric)"
INTERPOLATION_RANGE = (
    "nominal 90% range of random samples of this size: E[V(n)] +- 1.645 exact standard deviations"
)


class _Interpolation:
    """The corpus as its own model (``sample``): used at or below N only."""

    name = SAMPLE
    title = INTERPOLATION_METHOD
    band = None

    def __init__(self, tokens: int) -> None:
        self.tokens = tokens


def _anchored(
    engine: Engine, corpus_id: int, model: str, spectrum: Spectrum, loaded: LoadedModels | None = None
) -> Anchored:
    """The predictor of ``model`` on both sides of N (``app.core.anchored``)."""
    if model == SAMPLE:
        return Anchored(_Interpolation(spectrum.tokens), spectrum)
    predictor = (predictors(engine, corpus_id) if loaded is None else loaded.predictors).get(model)
    if predictor is None:
        failures = model_report(engine, corpus_id)["failures"] if loaded is None else loaded.failures
        reason = failures.get(model, "the fit failed")
        raise PredictionError(f"model {model!r} could not be fitted to this corpus: {reason}")
    return Anchored(predictor, spectrum)


# ------------------------------------------------------------------------------------ richness, unseen


def stored_text_order(corpus: Corpus) -> tuple[dict[str, Any], str | None]:
    """The text-order statistics stored with a corpus ({} when it has none), checked by the rules of a
    bundle's (``check_text_order``), and None; or {} and what is wrong when a hand-edited row or another
    program's left something else: only the statistics that need them are then missing."""
    try:
        value = json.loads(corpus.text_order_json or "{}")
        return (counts.check_text_order(value, corpus.tokens) if value else {}), None
    except (ValueError, TypeError) as exc:  # CountsInputError is a ValueError
        problem = str(exc).removeprefix("bundle: corpus.")
        return {}, f"the stored text-order statistics are damaged and not shown ({problem})"


def richness(engine: Engine, corpus_id: int, common_size: int | None = None) -> dict[str, Any]:
    """Richness indices at the corpus size (MATTR and MTLD measured in text order at ingestion) and, when
    asked, the size-dependent ones at a common size by exact interpolation."""
    corpus = store.get_corpus(engine, corpus_id)
    spectrum = load_spectrum(engine, corpus_id)
    text_order, damage = stored_text_order(corpus)
    at_size = asdict(richness_core.richness_indices(spectrum))
    at_size["mattr"] = text_order.get("mattr")
    at_size["mtld"] = text_order.get("mtld")
    out: dict[str, Any] = {
        "tokens": corpus.tokens,
        "at_corpus_size": at_size,
        "text_order_tokens": text_order.get("measured_tokens"),
    }
    if damage:
        out["text_order_damaged"] = damage
    if common_size is not None:
        if not 1 <= common_size <= corpus.tokens:
            raise PredictionError(f"common size must lie between 1 and the corpus size {corpus.tokens:,}")
        out["common_size"] = common_size
        out["at_common_size"] = asdict(richness_core.richness_at_size(spectrum, common_size))
    return out


def unseen_vocabulary(engine: Engine, corpus_id: int) -> list[dict[str, Any]]:
    """Good-Toulmin, smoothed Good-Toulmin, Efron-Thisted, Chao1, coverage and new-type rate."""
    return [asdict(e) for e in unseen.unseen_summary(load_spectrum(engine, corpus_id))]


def random_sample_spectrum(engine: Engine, corpus_id: int, tokens: int, random_state: int) -> dict[str, Any]:
    """Draw an actual random sample of ``tokens`` tokens (without replacement) from the stored counts and
    return its observed spectrum next to the exact expectation."""
    spectrum = load_spectrum(engine, corpus_id)
    if not 1 <= tokens <= spectrum.tokens:
        raise PredictionError(f"sample size must lie between 1 and the corpus size {spectrum.tokens:,}")
    frequencies = np.repeat(spectrum.m, spectrum.vm)
    rng = np.random.default_rng(random_state)
    drawn = rng.multivariate_hypergeometric(frequencies, tokens, method="marginals")
    observed = Spectrum.from_frequencies(drawn[drawn > 0])
    return {
        "tokens": tokens,
        "random_state": random_state,
        "types": observed.types,
        "expected_types": types_band(spectrum, tokens).types,
        "observed": [int(v) for v in observed.dense(LEGOMENA_SHOWN)],
        "expected": [float(v) for v in expected_spectrum(spectrum, tokens, LEGOMENA_SHOWN)],
    }


# -------------------------------------------------------------------------------------------- planning


def plan(engine: Engine, corpus_id: int, target: planning.Target, model: str = RECOMMENDED) -> dict[str, Any]:
    """The corpus size at which ``model`` reaches ``target``, with the range given by every other fitted
    model and by the recommended model's backtest band (types targets). A degenerate fit
    (``FittedModel.degenerate``) answers only at or below the corpus size, where the exact interpolation
    answers for it; beyond, its answer is the reason instead of a number."""
    corpus = store.get_corpus(engine, corpus_id)
    if model not in PLAN_MODELS:
        raise PredictionError(f"unknown model {model!r}; known: {', '.join(PLAN_MODELS)}")
    spectrum = load_spectrum(engine, corpus_id)
    fitted_models = predictors(engine, corpus_id)
    if model not in fitted_models:
        raise PredictionError(f"model {model!r} could not be fitted to this corpus")
    # Planning inverts the prediction: exact interpolation up to N, the anchored model beyond.
    fitted = {name: Anchored(p, spectrum) for name, p in fitted_models.items()}

    def degenerate(name: str) -> str | None:
        reason = getattr(fitted_models[name], "degenerate", None)
        return None if reason is None else f"its fit is degenerate: {reason}"

    def population(name: str) -> float | None:
        if name == RECOMMENDED or degenerate(name):
            return None
        p = fitted_models[name]
        size = p.model.population_size(p.params)
        # beyond N the model's growth is continued from V by the factor C: V + C (S - E(N)) types in all
        return None if size is None else fitted[name].population(size)

    def planned(name: str) -> float:
        answer = planning.plan(fitted[name], target, population(name))
        if answer > spectrum.tokens and degenerate(name):
            raise PredictionError(degenerate(name))
        return answer

    chao1 = unseen.chao1(spectrum).value
    try:
        tokens = planned(model)
    except planning.UnreachableTargetError as exc:
        extra = (
            f" (Chao1's lower bound of the total vocabulary: {chao1:,.0f} types)"
            if target.kind == "share"
            else ""
        )
        raise planning.UnreachableTargetError(f"{degenerate(model) or exc}{extra}") from exc
    except PredictionError as exc:
        raise PredictionError(f"model {model!r} cannot plan beyond the corpus size: {exc}") from exc
    by_model: dict[str, Any] = {}
    for name in fitted:
        if name in ("perfect_zipf_totals",):
            continue
        try:
            by_model[name] = planned(name)
        except (planning.UnreachableTargetError, ValueError, ArithmeticError) as exc:
            by_model[name] = degenerate(name) or str(exc)
    band: dict[str, float] = {}
    rec = fitted[RECOMMENDED]
    if target.kind == "types" and model == RECOMMENDED:
        for side, curve in (("low", rec.types_high), ("high", rec.types_low)):
            try:
                band[side] = planning.tokens_for_types(curve, target.value)
            except planning.UnreachableTargetError:
                continue
    candidates = [tokens, *band.values(), *(v for v in by_model.values() if isinstance(v, float))]
    return {
        "tokens": tokens,
        "low": min(candidates),
        "high": max(candidates),
        "model": model,
        "target": {"kind": target.kind, "value": target.value},
        "corpus_tokens": corpus.tokens,
        "times_corpus": tokens / corpus.tokens,
        "already_reached": tokens <= corpus.tokens,
        "by_model": by_model,
        "backtest_band": band or None,
        "population": population(model),
        "chao1": chao1,
    }
