"""Backtests: which extrapolation to trust for this corpus.

1. Random backtest. Thin the word counts binomially: keep each token with probability p, i.e. draw
   f_i' ~ Binomial(f_i, p) for every type and drop the zeros. That is an exact random sub-sample of the
   corpus of about p N tokens (each token is kept or dropped by an independent coin). Fit every model on the
   thinned spectrum, predict V and V_1..V_5 at the full size N and record the signed errors
   100 (prediction - observed) / observed in percent, for a few fractions p and random streams.
2. Text-order backtest. The same from the spectra of the first 10%, 25%, 50% of the text (saved when the
   corpus is read): how far a model fitted on the beginning of a text misses its end, which includes the
   clustering of words by topic that no random-sampling model represents.
3. Recommend: ``Ensemble``, the average of perfect Zipf and the recovered population spectrum unless the
   random backtests show other models clearly more accurate (then an inverse-error weighted average), with
   a nominal 90% range from a parametric bootstrap and the bias of its own backtests.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any, ClassVar

import numpy as np

from app.core.anchored import Anchored
from app.core.models import MODELS
from app.core.models.base import (
    ArrayLike,
    BandedPredictions,
    ErrorBand,
    FittedModel,
    VocabularyModel,
    as_output,
)
from app.core.spectrum import Spectrum

RANDOM = "random"
TEXT_ORDER = "text_order"
LEGOMENA = 5  # V_1..V_5 are checked
WEIGHT_FLOOR = 0.02  # relative error below which a backtest cannot rank models (see Ensemble)
ANCHOR = ("perfect_zipf", "population_spectrum")  # averaged unless the backtests clearly favour others
EVIDENCE_Z = 3.0  # paired z a model needs against the anchor to join the ensemble (see Ensemble)
RANDOM_STATES = tuple(range(1, 5))  # random streams of the random backtests: 4 thinnings per fraction
BOOTSTRAP_REPLICATES = (
    8  # parametric bootstrap replicates of the recommended prediction (see bootstrap_spread)
)
BOOTSTRAP_FACTORS = (2.0, 4.0, 10.0, 100.0)  # extrapolation factors the bootstrap spread is measured at
BOOTSTRAP_STATE = 20261202  # random stream of the bootstrap


def thin(spectrum: Spectrum, p: float, rng: np.random.Generator) -> Spectrum:
    """Binomial thinning: each type's frequency f becomes Binomial(f, p); types left at zero vanish."""
    kept = rng.binomial(np.repeat(spectrum.m, spectrum.vm), p)
    return Spectrum.from_frequencies(kept[kept > 0])


@dataclass(frozen=True)
class BacktestRun:
    """One model fitted on one part of the corpus and checked at the full size N.

    ``kind`` is RANDOM or TEXT_ORDER; ``label`` the kept fraction p or the prefix name; ``draw`` numbers the
    random thinnings (0 for text order). Errors are signed percentages 100 (prediction - observed) /
    observed for V and V_1..V_5; NaN when the fit failed (``failure`` says why).
    """

    model: str
    kind: str
    label: str
    draw: int
    fit_tokens: int
    types_error: float
    legomena_errors: tuple[float, ...]
    failure: str | None = None

    def as_dict(self) -> dict[str, Any]:
        return {
            "model": self.model,
            "kind": self.kind,
            "label": self.label,
            "draw": self.draw,
            "fit_tokens": self.fit_tokens,
            "types_error_percent": self.types_error,
            "legomena_error_percent": {str(k + 1): e for k, e in enumerate(self.legomena_errors)},
            "failure": self.failure,
        }


def _check(
    model: VocabularyModel, part: Spectrum, spectrum: Spectrum, kind: str, label: str, draw: int
) -> BacktestRun:
    """Fit one model on ``part`` and compare its prediction at N (anchored at the part's V, as every
    prediction beyond the corpus size is: ``app.core.anchored``) with the full spectrum."""
    N = spectrum.tokens
    try:
        fitted = Anchored(model.fit(part), part)
        with np.errstate(divide="ignore", invalid="ignore"):
            types_error = 100 * (float(fitted.types(N)) / spectrum.types - 1)
            observed = spectrum.dense(LEGOMENA)
            legomena = np.where(observed > 0, 100 * (fitted.spectrum(N, LEGOMENA) / observed - 1), np.nan)
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
        nan = float("nan")
        return BacktestRun(model.name, kind, label, draw, part.tokens, nan, (nan,) * LEGOMENA, str(exc))
    return BacktestRun(model.name, kind, label, draw, part.tokens, types_error, tuple(map(float, legomena)))


def _band(
    labels: np.ndarray, factors: np.ndarray, errors: np.ndarray, spread: tuple[tuple, tuple] = ((), ())
) -> ErrorBand | None:
    """Mean factor, RMS and mean relative error (errors as fractions, NaN ignored) for each backtest label,
    with the bootstrap spread (factors, relative sd)."""
    points = []
    for label in dict.fromkeys(labels):
        here = (labels == label) & np.isfinite(errors)
        if here.any():
            e = errors[here]
            points.append((float(np.mean(factors[here])), float(np.sqrt(np.mean(e**2))), float(np.mean(e))))
    points = sorted(p for p in points if p[0] > 1)
    if not points:
        return None
    return ErrorBand(*(tuple(p[i] for p in points) for i in range(3)), *spread)


@dataclass(frozen=True)
class Ensemble(BandedPredictions):
    """The recommended predictor: the average of perfect Zipf and the recovered population spectrum, joined
    by the models that the corpus's own backtests clearly show to be more accurate.

        E_rec[V(n)]   = sum_j w_j E_j[V(n)],
        E_rec[V_k(n)] = E_rec[V(n)] * sum_j u_j E_j[V_k(n)] / sum_j u_j E_j[V(n)]

    (the legomena are the u-weighted mixture's shares of the types, so that V_1 + ... + V_k <= V at every
    size whenever every member is coherent). Rule, applied separately to V (weights w) and to V_1..V_5
    (weights u):

    1. Anchor: the equal average of perfect Zipf and the population spectrum (ANCHOR). Their errors are
       complementary: perfect Zipf is stable but its bias grows with the size of the corpus (negative for
       V and V_1 on large texts), the population spectrum (Valiant & Valiant 2017) is nearly unbiased but
       noisier; averaging two forecasts with errors of opposite sign or little correlation lowers the error
       (Bates & Granger 1969). When one of the two cannot be fitted, the other alone is the anchor; when
       neither can, every usable model is a member.
    2. Members: the anchor and each model that beats it clearly in the random backtests (RANDOM_STATES
       thinnings at each of the fractions 0.1, 0.25, 0.5, pooled). Per run r, s_jr is model j's squared
       relative error of V (of V_1..V_5: their mean); the anchor's error is the average of its two
       models' signed errors. Model j joins when the paired one-sided statistic of
       d_r = s_anchor,r - s_jr exceeds EVIDENCE_Z = 3:  mean(d) / (sd(d) / sqrt(R)) > 3  (Diebold &
       Mariano 1995; the statistic is scipy.stats.ttest_rel's).
    3. Weights among the members: proportional to 1 / (MSE + f^2), MSE = mean_r s_r, floor
       f = WEIGHT_FLOOR = 2% (``inverse_error_weights``); the anchor's weight is shared equally by its two
       models; the other models weigh 0.

    Why these weights: backtests on thinnings ten times smaller than the corpus hardly tell which model
    will extrapolate the corpus itself better (over public-domain books the correlation between a model's
    backtest advantage and its real advantage was between -0.57 and +0.37), so they only let a model in
    on strong evidence; the fixed pair is what the accuracy benchmark (``benchmarks/accuracy.py``, README
    "Benchmarks") shows to be better than each model alone.

    Measured with ``benchmarks/accuracy.py`` on 9 public-domain books (English, French, Dutch; 17,000 to
    170,000 tokens), 5 random samples per book, median absolute % error over the 45 samples at 10x
    (V / V_1): this rule 3.32 / 8.57, perfect Zipf 3.96 / 11.79, population spectrum 3.98 / 12.07, GIGP
    4.99 / 10.99, finite Zipf-Mandelbrot 5.60 / 18.46; at 4x 1.07 / 2.37 against 1.61 / 6.08 for perfect
    Zipf, the best single model there. The largest per-book bias of V at 10x is +6.9% (the smallest book).

    The band (``ErrorBand``) combines the parametric bootstrap spread of this predictor (``bootstrap_spread``)
    with the bias of its own random backtests; its 90% ranges held the truth in 93% of the samples above,
    with a median half-width of 10% at 10x and 4% at 4x.
    """

    name: ClassVar[str] = "recommended"
    title: ClassVar[str] = (
        "recommended (average of perfect Zipf and the recovered population spectrum, unless the backtests "
        "clearly prefer other models)"
    )

    members: tuple[FittedModel, ...]
    types_weights: tuple[float, ...]
    legomena_weights: tuple[float, ...]
    tokens: int
    band: ErrorBand | None = None

    def types(self, n: ArrayLike) -> ArrayLike:
        """E[V(n)] = sum_j w_j E_j[V(n)] (members of weight 0 are not evaluated)."""
        values = sum(
            w * np.asarray(f.types(n), dtype=float)
            for w, f in zip(self.types_weights, self.members, strict=True)
            if w > 0
        )
        return as_output(np.asarray(values, dtype=float), n)

    def spectrum(self, n: float, k_max: int = 20) -> np.ndarray:
        """E_rec[V_k(n)], k = 1..k_max: the types times the u-weighted mixture's shares (class docstring)."""
        legomena, types = np.zeros(k_max), 0.0
        for u, f in zip(self.legomena_weights, self.members, strict=True):
            if u > 0:
                legomena += u * f.spectrum(n, k_max)
                types += u * float(f.types(n))
        return float(self.types(n)) * legomena / types if types > 0 else legomena

    def as_dict(self) -> dict[str, Any]:
        return {
            "model": self.name,
            "title": self.title,
            "tokens": self.tokens,
            "weights": {
                f.name: {"types": w, "legomena": u}
                for f, w, u in zip(self.members, self.types_weights, self.legomena_weights, strict=True)
            },
            "band": None if self.band is None else self.band.as_dict(),
        }


def run_squares(errors: np.ndarray) -> np.ndarray:
    """Squared relative errors per run and model: ``errors`` is (runs, models) or (runs, models, k); over a
    last axis k the finite squares are averaged. NaN where no error is finite."""
    squares = np.asarray(errors, dtype=float) ** 2
    if squares.ndim == 2:
        return squares
    finite = np.isfinite(squares)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(finite, squares, 0).sum(axis=-1) / finite.sum(axis=-1)


def _mean_square(squares: np.ndarray) -> float:
    """Mean of the finite squared errors; infinite when none is finite."""
    finite = squares[np.isfinite(squares)]
    return float(np.mean(finite)) if finite.size else np.inf


def inverse_error_weights(mean_squares: np.ndarray) -> np.ndarray:
    """w_j = (1 / (MSE_j + f^2)) / sum_i (1 / (MSE_i + f^2)); equal weights when no MSE is finite."""
    raw = 1 / (mean_squares + WEIGHT_FLOOR**2)
    return raw / raw.sum() if raw.sum() > 0 else np.full(raw.shape, 1 / raw.size)


def clearly_better(anchor: np.ndarray, other: np.ndarray, z: float = EVIDENCE_Z) -> bool:
    """Paired one-sided test that ``other`` has smaller squared errors than ``anchor`` (same runs):
    d_r = anchor_r - other_r over the runs where both are finite; True when
    mean(d) > z * sd(d) / sqrt(R) with the sample standard deviation (R - 1 degrees of freedom) and R >= 2."""
    both = np.isfinite(anchor) & np.isfinite(other)
    d = anchor[both] - other[both]
    if d.size < 2:
        return False
    sd = float(np.std(d, ddof=1))
    return bool(np.mean(d) > z * sd / np.sqrt(d.size)) if sd > 0 else bool(np.mean(d) > 0)


def anchored_weights(errors: np.ndarray, anchor: Sequence[int]) -> np.ndarray:
    """Ensemble weights from signed relative errors (runs, models) or (runs, models, k): the anchor (the
    equal average of the models ``anchor``, its error the average of theirs) and the models clearly better
    than it share ``inverse_error_weights`` of their mean squares, the anchor's share split equally among
    its models; the others get 0. Without an anchor every model is a member (see Ensemble)."""
    errors = np.asarray(errors, dtype=float)
    models = errors.shape[1]
    squares = run_squares(errors)
    if not anchor:
        return inverse_error_weights(np.array([_mean_square(squares[:, j]) for j in range(models)]))
    with np.errstate(invalid="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # runs where every anchor model failed: NaN
        composite = run_squares(np.nanmean(errors[:, list(anchor)], axis=1, keepdims=True))[:, 0]
    joiners = [j for j in range(models) if j not in anchor and clearly_better(composite, squares[:, j])]
    shares = inverse_error_weights(
        np.array([_mean_square(composite), *(_mean_square(squares[:, j]) for j in joiners)])
    )
    weights = np.zeros(models)
    weights[list(anchor)] = shares[0] / len(anchor)
    weights[joiners] = shares[1:]
    return weights


def bootstrap_spread(
    recommended: Ensemble,
    population: FittedModel,
    spectrum: Spectrum,
    replicates: int = BOOTSTRAP_REPLICATES,
    factors: Sequence[float] = BOOTSTRAP_FACTORS,
) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """Relative standard deviation of the recommended prediction of V(t N) at each factor t, by parametric
    bootstrap (Efron & Tibshirani 1993, ch. 6): draw ``replicates`` spectra of N tokens from the recovered
    population (``PopulationSpectrum.sample_spectrum``), refit every member of weight > 0 on each, and
    predict with the same weights, anchored at the replicate's own V. Empty when no replicate could be
    refitted."""
    rng = np.random.default_rng(BOOTSTRAP_STATE)
    used = [
        j
        for j, (w, u) in enumerate(zip(recommended.types_weights, recommended.legomena_weights, strict=True))
        if w > 0 or u > 0
    ]
    predictions = []
    for _ in range(replicates):
        replicate = population.model.sample_spectrum(spectrum.tokens, population.params, rng)
        try:
            members = [recommended.members[j].model.fit(replicate) for j in used]
        except (ValueError, ArithmeticError, np.linalg.LinAlgError):
            continue
        ensemble = Ensemble(
            tuple(members),
            tuple(recommended.types_weights[j] for j in used),
            tuple(recommended.legomena_weights[j] for j in used),
            replicate.tokens,
        )
        sizes = np.asarray(factors) * replicate.tokens
        predictions.append(np.asarray(Anchored(ensemble, replicate).types(sizes), dtype=float))
    if len(predictions) < 2:
        return (), ()
    values = np.array(predictions)
    sd = np.std(values, axis=0, ddof=1) / np.mean(values, axis=0)
    return tuple(map(float, factors)), tuple(map(float, sd))


@dataclass(frozen=True)
class BacktestReport:
    """Full-size fits (with their backtest error bands), every backtest run, and the recommended ensemble."""

    tokens: int
    fitted: Mapping[str, FittedModel]
    failures: Mapping[str, str]
    runs: tuple[BacktestRun, ...]
    recommended: Ensemble

    def summary(self) -> list[dict[str, Any]]:
        """Per model, kind and label: median signed error of V and median absolute error of V_1..V_5 (%)."""
        rows = []
        keys = dict.fromkeys((r.model, r.kind, r.label) for r in self.runs)
        for model, kind, label in keys:
            here = [r for r in self.runs if (r.model, r.kind, r.label) == (model, kind, label)]
            types = np.array([r.types_error for r in here])
            legomena = np.array([r.legomena_errors for r in here])
            ok = np.isfinite(types)
            rows.append(
                {
                    "model": model,
                    "kind": kind,
                    "label": label,
                    "runs": len(here),
                    "failed": int((~ok).sum()),
                    "types_error_percent": float(np.median(types[ok])) if ok.any() else None,
                    "legomena_abs_error_percent": float(np.median(np.abs(legomena[ok])))
                    if ok.any()
                    else None,
                }
            )
        return rows

    def as_dict(self) -> dict[str, Any]:
        return {
            "tokens": self.tokens,
            "fitted": {name: f.as_dict() for name, f in self.fitted.items()},
            "failures": dict(self.failures),
            "runs": [r.as_dict() for r in self.runs],
            "summary": self.summary(),
            "recommended": self.recommended.as_dict(),
        }


def backtest(
    spectrum: Spectrum,
    prefix_spectra: Mapping[str, Spectrum] | None = None,
    random_states: Sequence[int] = RANDOM_STATES,
    fractions: Sequence[float] = (0.1, 0.25, 0.5),
    models: Mapping[str, VocabularyModel] = MODELS,
) -> BacktestReport:
    """Fit every model on the corpus and on its thinnings and prefixes, and build the recommended ensemble.

    ``random_states`` start one numpy Generator each (reproducible thinnings); every fraction is thinned
    once per state. A model is usable when it fits the full corpus and at least half of its random
    backtests; the usable models are the ensemble's members, weighted by the rule of ``Ensemble`` (weight 0
    for those the rule leaves out).
    """
    if spectrum.tokens and not spectrum.hapaxes:
        raise ValueError(
            "the corpus has no hapax legomena (every word occurs at least twice, as in a text pasted more than "
            "once): the models extrapolate from the rarest words, so none can be fitted; the exact statistics "
            "and the random-sample interpolation still hold"
        )
    fitted: dict[str, FittedModel] = {}
    failures: dict[str, str] = {}
    for name, model in models.items():
        try:
            fitted[name] = model.fit(spectrum)
        except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
            failures[name] = str(exc)

    parts = []
    for draw, state in enumerate(random_states, start=1):
        rng = np.random.default_rng(state)
        parts += [(RANDOM, f"{p:g}", draw, thin(spectrum, p, rng)) for p in fractions]
    parts += [(TEXT_ORDER, label, 0, prefix) for label, prefix in (prefix_spectra or {}).items()]
    runs = tuple(
        _check(model, part, spectrum, kind, label, draw)
        for kind, label, draw, part in parts
        for model in models.values()
    )

    # Random runs as (runs x models) matrices of relative errors, aligned by part.
    random_runs = [r for r in runs if r.kind == RANDOM]
    names = list(models)
    shape = (len(random_runs) // len(names), len(names))
    types_err = np.array([r.types_error for r in random_runs]).reshape(shape) / 100
    legomena_err = np.array([r.legomena_errors for r in random_runs]).reshape(*shape, LEGOMENA) / 100
    with np.errstate(divide="ignore"):  # a thinning of a tiny corpus may hold no token: its runs failed
        factors = spectrum.tokens / np.array([r.fit_tokens for r in random_runs]).reshape(shape)[:, 0]
    labels = np.array([r.label for r in random_runs]).reshape(shape)[:, 0]

    ok = np.isfinite(types_err)
    usable = [j for j, name in enumerate(names) if name in fitted and ok[:, j].mean() >= 0.5]
    if not usable:
        raise ValueError("no model could be backtested on this corpus (too few tokens?)")
    members = [names[j] for j in usable]
    anchor = [members.index(name) for name in ANCHOR if name in members]
    types_w = anchored_weights(types_err[:, usable], anchor)
    legomena_w = anchored_weights(legomena_err[:, usable], anchor)

    # The ensemble's own error in each random run: its weights renormalised over the models that ran.
    member_err = types_err[:, usable]
    present = np.isfinite(member_err)
    with np.errstate(invalid="ignore", divide="ignore"):
        ensemble_err = (np.where(present, member_err, 0) @ types_w) / (present @ types_w)
    recommended = Ensemble(
        tuple(fitted[names[j]] for j in usable),
        tuple(map(float, types_w)),
        tuple(map(float, legomena_w)),
        spectrum.tokens,
    )
    population = fitted.get("population_spectrum")
    spread = bootstrap_spread(recommended, population, spectrum) if population is not None else ((), ())
    for j in usable:
        fitted[names[j]] = replace(fitted[names[j]], band=_band(labels, factors, types_err[:, j], spread))
    recommended = replace(
        recommended,
        members=tuple(fitted[names[j]] for j in usable),
        band=_band(labels, factors, ensemble_err, spread),
    )
    return BacktestReport(spectrum.tokens, fitted, failures, runs, recommended)
