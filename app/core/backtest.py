"""Backtests: which extrapolation to trust for this corpus.

1. Random backtest. Thin the word counts binomially: keep each token with probability p, i.e. draw
   f_i' ~ Binomial(f_i, p) for every type and drop the zeros. That is an exact random sub-sample of the
   corpus of about p N tokens (each token is kept or dropped by an independent coin). Fit every model on the
   thinned spectrum, predict V and V_1..V_5 at the full size N and record the signed errors
   100 (prediction - observed) / observed in percent, for a few fractions p and random streams.
2. Text-order backtest. The same from the spectra of the first 10%, 25%, 50% of the text (saved when the
   corpus is read): how far a model fitted on the beginning of a text misses its end, which includes the
   clustering of words by topic that no random-sampling model represents.
3. Recommend: ``Ensemble``, a weighted average of the usable models whose weights are chosen by the random
   backtests of this corpus (inverse expected squared error at 10x, shrunk toward equal weights and trimmed,
   separately for V and for the legomena); no model is favoured by construction.
4. Ranges: every model's (and the ensemble's) own parametric bootstrap spread, widened by its own backtest
   bias (``ErrorBand``).
"""

from __future__ import annotations

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
FRACTIONS = (0.1, 0.25, 0.5)  # kept shares of the random backtests: extrapolations by 10x, 4x and 2x
RANDOM_STATES = tuple(range(1, 7))
"""Random streams of the random backtests: 6 thinnings per fraction, 18 runs. The runs at one fraction
differ only by sampling, so they mainly measure a model's bias there; 6 per fraction put the standard error
of a mean error at 1 / sqrt(6) = 0.41 of the run-to-run spread, enough to tell a model that errs by
several of its own spreads (the differences that matter for the weights) at a cost of 18 fits per model."""
TARGET_FACTOR = 10.0
"""The extrapolation the weights are chosen for: the expected squared log error of a prediction 10x beyond
the corpus (``expected_square_log_error``), the farthest factor the product's accuracy is measured at."""
SHRINKAGE = 0.02**2
"""Added to every model's expected squared log error before inverting it (``evidence_weights``): (2%)^2, the
size of the run-to-run spread of backtest errors on texts of 20,000 to 200,000 tokens (a choice of ours).
Models whose errors are both below 2% share the weight almost equally instead of the smaller error taking
it all (shrinkage toward equal weights)."""
TRIM_FACTOR = 4.0
"""A model whose expected squared log error (plus SHRINKAGE) is more than 4 times the best model's gets
weight 0: twice the best model's error in root-mean-square terms (trimming, chosen on the simulated
populations and the 10% samples of books; see the README's accuracy section)."""
MISFIT_TRIM = 3.0
"""A model whose chi-square per degree of freedom on the whole corpus is more than 3 times the smallest
among the models (or more than 3 when that is below 1) gets weight 0: a backtest from a tenth of the corpus
cannot see a vocabulary that saturates, the fit to the whole spectrum can (an open model on a closed
vocabulary misfits its spectrum by tens of chi-square units per degree of freedom)."""
BOOTSTRAP_REPLICATES = 24
"""Parametric bootstrap replicates per report (see ``bootstrap_spreads``). The relative standard error of a
standard deviation estimated from R replicates is about 1 / sqrt(2 (R - 1)) (normal theory): 15% for 24,
against 27% for 8; each replicate costs one fit of every model."""
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
    model: VocabularyModel,
    part: Spectrum,
    spectrum: Spectrum,
    kind: str,
    label: str,
    draw: int,
    near: FittedModel | None = None,
) -> BacktestRun:
    """Fit one model on ``part`` (from the start ``near``, the model's fit to the whole corpus, when given)
    and compare its prediction at N (anchored at the part's V, as every prediction beyond the corpus size
    is: ``app.core.anchored``) with the full spectrum."""
    N = spectrum.tokens
    try:
        fitted = Anchored(model.fit(part, near=None if near is None else near.params), part)
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
    """RMS and mean log error log(1 + e) for each backtest label at its mean factor (``errors`` are signed
    relative errors e as fractions, NaN ignored), with a bootstrap spread (factors, sd of the log
    prediction)."""
    points = []
    with np.errstate(invalid="ignore", divide="ignore"):
        log_errors = np.log1p(errors)
    for label in dict.fromkeys(labels):
        here = (labels == label) & np.isfinite(log_errors)
        if here.any():
            e = log_errors[here]
            points.append((float(np.mean(factors[here])), float(np.sqrt(np.mean(e**2))), float(np.mean(e))))
    points = sorted(p for p in points if p[0] > 1)
    if not points:
        return None
    return ErrorBand(*(tuple(p[i] for p in points) for i in range(3)), *spread)


@dataclass(frozen=True)
class Ensemble(BandedPredictions):
    """The recommended predictor: a weighted average of the fitted models, the weights chosen by this
    corpus's own random backtests.

        E_rec[V(n)]   = sum_j w_j E_j[V(n)],
        E_rec[V_k(n)] = E_rec[V(n)] * sum_j u_j E_j[V_k(n)] / sum_j u_j E_j[V(n)]

    (the legomena are the u-weighted mixture's shares of the types, so that V_1 + ... + V_k <= V at every
    size whenever every member is coherent). The weights w (for V) and u (for V_1..V_5) are chosen
    separately by ``evidence_weights`` from every usable model's random backtests on this corpus (each of
    RANDOM_STATES thinnings at each of FRACTIONS, predicting the whole corpus): inverse expected squared log
    error at TARGET_FACTOR, with shrinkage and trimming. Every model competes on the same terms: finite-
    population models win the weight on a vocabulary that saturates (their backtests and their fits are the
    ones that do not overshoot), open models on an open one. A model whose fit is degenerate (a parameter
    on its domain's edge) or that fails on half of its backtests gets no weight.

    The band (``ErrorBand``) combines the ensemble's own parametric bootstrap spread (the same weights
    applied to every member refitted on each replicate) with the bias of its own backtests.
    """

    name: ClassVar[str] = "recommended"
    title: ClassVar[str] = (
        "recommended (weighted average of the models, weights from this corpus's backtests)"
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
            "rule": WEIGHT_RULE,
            "weights": {
                f.name: {"types": w, "legomena": u}
                for f, w, u in zip(self.members, self.types_weights, self.legomena_weights, strict=True)
            },
            "band": None if self.band is None else self.band.as_dict(),
        }


WEIGHT_RULE = (
    f"weights chosen by this corpus's random backtests ({len(RANDOM_STATES)} random thinnings to each of "
    f"{', '.join(f'{p:.0%}' for p in FRACTIONS)} of the tokens, every model predicting the whole): each "
    "model's squared error is extrapolated to a prediction 10 times the corpus, weights are proportional to "
    "1 / (that error + (2%)^2); a model whose error is more than 4 times the best one's, whose fit to the "
    "corpus's spectrum is more than 3 times worse than the best fit (chi-square per degree of freedom), or "
    "whose fit is degenerate gets weight 0, as does perfect Zipf from totals, which ignores the spectrum; "
    "separately for the types and for V_1..V_5"
)


def expected_square_log_error(
    errors: np.ndarray, factors: np.ndarray, target: float = TARGET_FACTOR
) -> np.ndarray:
    """Per model, the expected squared log error of a prediction ``target`` times beyond the corpus.

    A backtest from a share 1/t of the corpus predicts t times its size. The log error y = log(1 + e) of an
    extrapolation grows with the distance in log size, so per model y = c ln t + noise is fitted through the
    origin (no error at t = 1) by least squares over every run (and every k of V_1..V_5 when ``errors`` is
    (runs, models, k)): c = sum x y / sum x^2, x = ln t. The expected squared error at T is then
    (ln T)^2 (c^2 + var c), var c = s^2 / sum x^2 with s^2 the residual variance (a prediction interval's
    mean square for a regression through the origin; e.g. Draper & Smith, Applied Regression Analysis, ch.
    1, from memory): bias and uncertainty of the error both count. Runs that failed (NaN) are left out; a
    model with fewer than 2 runs gets infinity."""
    e = np.asarray(errors, dtype=float)
    if e.ndim == 2:
        e = e[:, :, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        y = np.log1p(e)
    x = np.broadcast_to(np.log(np.asarray(factors, dtype=float))[:, None], e[:, 0, :].shape)
    result = np.full(e.shape[1], np.inf)
    for j in range(e.shape[1]):
        ok = np.isfinite(y[:, j, :]) & np.isfinite(x) & (x > 0)
        if ok.sum() < 2:
            continue
        xs, ys = x[ok], y[:, j, :][ok]
        sxx = float(np.sum(xs**2))
        slope = float(np.sum(xs * ys)) / sxx
        slope_variance = float(np.sum((ys - slope * xs) ** 2)) / (ys.size - 1) / sxx
        result[j] = np.log(target) ** 2 * (slope**2 + slope_variance)
    return result


def misfit_trimmed(misfit: np.ndarray, trim: float = MISFIT_TRIM) -> np.ndarray:
    """True for the models whose chi-square per degree of freedom (NaN: none, never trimmed) is more than
    ``trim`` times max(1, the smallest one): a misfit the model's own sampling noise cannot explain."""
    misfit = np.asarray(misfit, dtype=float)
    known = np.isfinite(misfit)
    if not known.any():
        return np.zeros(misfit.shape, dtype=bool)
    return known & (misfit > trim * max(1.0, float(np.min(misfit[known]))))


def evidence_weights(
    errors: np.ndarray,
    factors: np.ndarray,
    excluded: np.ndarray | None = None,
    shrinkage: float = SHRINKAGE,
    trim: float = TRIM_FACTOR,
) -> np.ndarray:
    """w_j proportional to 1 / (MSE_j + shrinkage), MSE_j = ``expected_square_log_error``; 0 for the models
    ``excluded`` (misfit, degenerate, fitted to totals alone) and for those with MSE_j + shrinkage > trim times the best one's.

    Inverse mean-squared-error weights are the combination of Bates & Granger (1969) without the
    covariances, the choice that forecast-combination studies find hard to beat (Stock & Watson 2004,
    "Combination forecasts of output growth in a seven-country data set", which also trims the worst
    forecasts; from memory); the shrinkage pulls models of similar accuracy toward equal weights (Smith &
    Wallis 2009, the "forecast combination puzzle"). When every model is excluded, the exclusion is
    ignored (the evidence then cannot tell them apart)."""
    score = expected_square_log_error(errors, factors) + shrinkage
    if excluded is not None and not np.all(excluded | ~np.isfinite(score)):
        score = np.where(excluded, np.inf, score)
    if not np.isfinite(score).any():
        return np.full(score.shape, 1 / score.size)
    weights = np.where(score <= trim * np.min(score), 1 / score, 0.0)
    return weights / weights.sum()


def _misfit(fitted: FittedModel) -> float:
    """Chi-square per degree of freedom of a fit (NaN when the model has no goodness-of-fit test)."""
    g = fitted.goodness_of_fit
    return g.statistic / g.df if g is not None and g.statistic is not None and g.df else float("nan")


def combined_errors(errors: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """The ensemble's signed relative error in each run: sum_j w_j e_j, its weights renormalised over the
    models that ran (NaN when none of weight > 0 did)."""
    present = np.isfinite(errors)
    with np.errstate(invalid="ignore", divide="ignore"):
        return (np.where(present, errors, 0) @ weights) / (present @ weights)


@dataclass(frozen=True)
class BootstrapSpreads:
    """The sd of the log prediction of V(t N) over parametric bootstrap replicates, at each factor t, for
    every model (by name) and for the ensemble; a model absent from ``models`` could not be refitted on
    enough replicates."""

    factors: tuple[float, ...]
    models: Mapping[str, tuple[float, ...]]
    ensemble: tuple[float, ...]

    def of(self, name: str) -> tuple[tuple, tuple]:
        """(factors, sd) for ``ErrorBand``, or ((), ()) when there is none."""
        sd = self.ensemble if name == Ensemble.name else self.models.get(name, ())
        return (self.factors, sd) if sd else ((), ())


def _weighted(ensemble: Ensemble) -> list[tuple[FittedModel, float, float]]:
    """The members of weight > 0 (for V or for the legomena) with their two weights."""
    members = zip(ensemble.members, ensemble.types_weights, ensemble.legomena_weights, strict=True)
    return [(f, w, u) for f, w, u in members if w > 0 or u > 0]


def between_models_sd(ensemble: Ensemble, factors: Sequence[float] = BOOTSTRAP_FACTORS) -> tuple[float, ...]:
    """sqrt(sum_j w_j (log E_j[V(t N)] - log E_rec[V(t N)])^2) at each factor t: the weighted spread of the
    members' predictions around the average (the between-model variance of a model average, Hoeting et
    al. 1999), each member anchored at the corpus's V like the average."""
    sizes = np.asarray(factors, dtype=float) * ensemble.tokens

    def log_growth(predictor) -> np.ndarray:
        return np.log(
            np.asarray(predictor.types(sizes), dtype=float) / float(predictor.types(ensemble.tokens))
        )

    average = log_growth(ensemble)
    squares = sum(w * (log_growth(f) - average) ** 2 for f, w, _ in _weighted(ensemble) if w > 0)
    return tuple(map(float, np.sqrt(squares)))


def _log_sd(predictions: list[np.ndarray]) -> tuple[float, ...]:
    """Standard deviation (R - 1 degrees of freedom) of the log predictions at each factor; () for fewer
    than 2 replicates."""
    if len(predictions) < 2:
        return ()
    return tuple(map(float, np.std(np.log(np.array(predictions)), axis=0, ddof=1)))


def bootstrap_spreads(
    fitted: Mapping[str, FittedModel],
    recommended: Ensemble,
    population: FittedModel,
    spectrum: Spectrum,
    replicates: int = BOOTSTRAP_REPLICATES,
    factors: Sequence[float] = BOOTSTRAP_FACTORS,
    warm_start: bool = True,
) -> BootstrapSpreads:
    """Each model's own sampling spread by parametric bootstrap (Efron & Tibshirani 1993, ch. 6): draw
    ``replicates`` spectra of N tokens from the recovered population (``PopulationSpectrum.sample_spectrum``,
    the least committal estimate of the population: a histogram, open or closed as the data say), refit
    every model of ``fitted`` on each and predict V(t N) anchored at the replicate's own V; the ensemble
    combines its members' replicate predictions with its own weights (replicates where a member of weight
    > 0 failed are left out of its spread). ``warm_start``: each refit starts from the model's fit to the
    corpus (``VocabularyModel.fit``'s ``near``) instead of from every initial guess."""
    rng = np.random.default_rng(BOOTSTRAP_STATE)
    per_model: dict[str, list[np.ndarray]] = {name: [] for name in fitted}
    combined: list[np.ndarray] = []
    used = [(f.name, w, u) for f, w, u in _weighted(recommended)]
    for _ in range(replicates):
        replicate = population.model.sample_spectrum(spectrum.tokens, population.params, rng)
        sizes = np.asarray(factors) * replicate.tokens
        refitted = {}
        for name, model in fitted.items():
            try:
                with np.errstate(all="ignore"):
                    refit = model.model.fit(replicate, near=model.params if warm_start else None)
                    values = np.asarray(Anchored(refit, replicate).types(sizes), dtype=float)
            except (ValueError, ArithmeticError, np.linalg.LinAlgError):
                continue
            if np.all(np.isfinite(values)) and np.all(values > 0):
                refitted[name] = refit
                per_model[name].append(values)
        if all(name in refitted for name, _, _ in used):
            ensemble = Ensemble(
                tuple(refitted[name] for name, _, _ in used),
                tuple(w for _, w, _ in used),
                tuple(u for _, _, u in used),
                replicate.tokens,
            )
            combined.append(np.asarray(Anchored(ensemble, replicate).types(sizes), dtype=float))
    return BootstrapSpreads(
        tuple(map(float, factors)),
        {name: sd for name, values in per_model.items() if (sd := _log_sd(values))},
        _log_sd(combined),
    )


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
    fractions: Sequence[float] = FRACTIONS,
    models: Mapping[str, VocabularyModel] = MODELS,
    warm_start: bool = True,
) -> BacktestReport:
    """Fit every model on the corpus and on its thinnings and prefixes, and build the recommended ensemble.

    ``random_states`` start one numpy Generator each (reproducible thinnings); every fraction is thinned
    once per state. A model is usable when it fits the full corpus and at least half of its random
    backtests; the usable models are the ensemble's members, weighted by ``evidence_weights`` (see
    ``Ensemble``). Every fitted model gets its own band: its own bootstrap spread and backtest bias.

    ``warm_start``: the fits to thinnings, prefixes and bootstrap replicates start from the model's fit to
    the whole corpus (one least-squares descent each instead of one per guess; the same results within the
    solver's tolerance, ``tests/core/test_backtest_warm_start.py``) instead of from every initial guess.
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
        _check(model, part, spectrum, kind, label, draw, fitted.get(name) if warm_start else None)
        for kind, label, draw, part in parts
        for name, model in models.items()
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
    excluded = misfit_trimmed([_misfit(fitted[names[j]]) for j in usable]) | np.array(
        [fitted[names[j]].degenerate is not None or not fitted[names[j]].model.reads_spectrum for j in usable]
    )
    types_w = evidence_weights(types_err[:, usable], factors, excluded)
    legomena_w = evidence_weights(legomena_err[:, usable], factors, excluded)
    recommended = Ensemble(
        tuple(fitted[names[j]] for j in usable),
        tuple(map(float, types_w)),
        tuple(map(float, legomena_w)),
        spectrum.tokens,
    )
    population = fitted.get("population_spectrum")
    spreads = (
        bootstrap_spreads(fitted, recommended, population, spectrum, warm_start=warm_start)
        if population is not None
        else BootstrapSpreads((), {}, ())
    )
    for j, name in enumerate(names):
        if name in fitted:
            band = _band(labels, factors, types_err[:, j], spreads.of(name))
            fitted[name] = replace(fitted[name], band=band)
    band = _band(labels, factors, combined_errors(types_err[:, usable], types_w), spreads.of(Ensemble.name))
    if band is not None:
        band = replace(band, between_factors=BOOTSTRAP_FACTORS, between_sd=between_models_sd(recommended))
    recommended = replace(recommended, members=tuple(fitted[names[j]] for j in usable), band=band)
    return BacktestReport(spectrum.tokens, fitted, failures, runs, recommended)
