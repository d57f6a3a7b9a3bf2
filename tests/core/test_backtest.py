"""Backtests and the recommended ensemble."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import stats

from app.core.anchored import Anchored
from app.core.backtest import (
    FRACTIONS,
    RANDOM,
    RANDOM_STATES,
    SHRINKAGE,
    TARGET_FACTOR,
    TEXT_ORDER,
    TRIM_FACTOR,
    Ensemble,
    backtest,
    evidence_weights,
    expected_square_log_error,
    misfit_trimmed,
    thin,
)
from app.core.interpolation import expected_types_binomial
from app.core.models import MODELS
from app.core.spectrum import Spectrum
from tests.core.population_samples import poisson_sample, power_law_density, stratified_population


@pytest.fixture(scope="module")
def fzm_corpus() -> Spectrum:
    # 1e6 tokens from a finite Zipf-Mandelbrot population (Evert 2004) of about 7,000 types.
    pi = stratified_population(power_law_density(0.5, 1e-6, 0.02), 1e-6, 0.02)
    return poisson_sample(pi, 1e6, np.random.default_rng(0))


@pytest.fixture(scope="module")
def prefixes(fzm_corpus) -> dict[str, Spectrum]:
    # Stand-ins for text-order prefixes: the first 10% / 50% of the tokens in one shuffled order.
    tokens = np.repeat(np.arange(fzm_corpus.types), np.repeat(fzm_corpus.m, fzm_corpus.vm))
    np.random.default_rng(9).shuffle(tokens)
    out = {}
    for label, share in (("first 10%", 0.1), ("first 50%", 0.5)):
        counts = np.bincount(tokens[: int(share * tokens.size)])
        out[label] = Spectrum.from_frequencies(counts[counts > 0])
    return out


@pytest.fixture(scope="module")
def report(fzm_corpus, prefixes):
    return backtest(fzm_corpus, prefixes)


def test_thinning_is_a_binomial_sample():
    # Keeping each token with probability p: tokens ~ Binomial(N, p) (scipy.stats.binom) and
    # E[V] = sum_m V_m (1 - (1-p)^m) (binomial interpolation). 200 draws, 4 standard errors.
    spectrum = Spectrum.from_pairs([(1, 800), (2, 300), (3, 150), (7, 60), (25, 12), (300, 2)])
    rng = np.random.default_rng(1)
    p = 0.3
    draws = [thin(spectrum, p, rng) for _ in range(200)]
    tokens = np.array([d.tokens for d in draws])
    types = np.array([d.types for d in draws])
    mean, var = stats.binom.stats(spectrum.tokens, p, moments="mv")
    assert abs(tokens.mean() - mean) < 4 * np.sqrt(var / 200)
    assert abs(
        types.mean() - expected_types_binomial(spectrum, p * spectrum.tokens)
    ) < 4 * types.std() / np.sqrt(200)
    assert all(d.m.max() <= spectrum.m.max() for d in draws)


def test_simulated_finite_zipf_mandelbrot_population_lies_between_the_recovered_solutions(report):
    # Reference: the population itself, E[V(n)] = sum_i (1 - e^(-n pi_i)) under Poisson sampling (Baayen
    # 2001, ch. 2). Finite Zipf-Mandelbrot, the family that generated the corpus, predicts 10x within 3%; the
    # truth lies between the recovered population spectrum's lower and upper solutions (Valiant & Valiant
    # 2017: both explain the observed spectrum).
    pi = stratified_population(power_law_density(0.5, 1e-6, 0.02), 1e-6, 0.02)
    N = report.tokens
    truth = float(np.sum(-np.expm1(-10 * N * pi)))
    assert report.fitted["bounded_power_law"].types(10 * N) == pytest.approx(truth, rel=0.03)
    population = report.fitted["population_spectrum"]
    lower = population.model.expected_types(10 * N, population.params, "lower")
    upper = population.model.expected_types(10 * N, population.params, "upper")
    assert lower < truth < upper


def test_a_saturating_vocabulary_is_recognised_by_its_backtests(report, fzm_corpus):
    # The same nearly exhausted finite population (truth as above): the open models overshoot in every
    # backtest, so the weight goes to the models that saturate, and the recommendation predicts 10x within
    # 5% of the truth with the truth inside its nominal 90% range.
    pi = stratified_population(power_law_density(0.5, 1e-6, 0.02), 1e-6, 0.02)
    N = report.tokens
    truth = float(np.sum(-np.expm1(-10 * N * pi)))
    ensemble = report.recommended
    weights = dict(zip((f.name for f in ensemble.members), ensemble.types_weights, strict=True))
    finite = sum(w for name, w in weights.items() if report.fitted[name].model.finite_population)
    assert finite > 0.5, weights
    predicted = Anchored(ensemble, fzm_corpus)
    assert predicted.types(10 * N) == pytest.approx(truth, rel=0.05)
    assert predicted.types_low(10 * N) <= truth <= predicted.types_high(10 * N)


def _random_errors(report, name: str) -> tuple[np.ndarray, np.ndarray]:
    """Per random run (in run order): signed relative error of V, and of V_1..V_5."""
    runs = [r for r in report.runs if r.model == name and r.kind == RANDOM]
    return np.array([r.types_error / 100 for r in runs]), np.array([r.legomena_errors for r in runs]) / 100


def test_expected_square_log_error_is_the_least_squares_line_through_the_origin():
    # Reference: numpy.linalg.lstsq on the design matrix [ln t] (no intercept) gives the slope c and the
    # residual sum of squares; the expected squared error at T is (ln T)^2 (c^2 + s^2 / sum (ln t)^2),
    # s^2 = RSS / (n - 1) (the slope's variance in a regression through the origin, Draper & Smith, from
    # memory).
    rng = np.random.default_rng(3)
    factors = np.repeat([10.0, 4.0, 2.0], 6)
    x = np.log(factors)
    errors = np.column_stack([np.expm1(c * x + rng.normal(0, 0.01, x.size)) for c in (0.02, -0.05, 0.1)])
    got = expected_square_log_error(errors, factors)
    for j in range(3):
        y = np.log1p(errors[:, j])
        (slope,), (rss,), _, _ = np.linalg.lstsq(x[:, None], y, rcond=None)
        expected = np.log(TARGET_FACTOR) ** 2 * (slope**2 + rss / (x.size - 1) / np.sum(x**2))
        assert got[j] == pytest.approx(expected, rel=1e-10)
    # an error growing exactly as t^c has no uncertainty: (c ln 10)^2
    exact = np.expm1(0.03 * x)[:, None]
    assert expected_square_log_error(exact, factors)[0] == pytest.approx((0.03 * np.log(10)) ** 2)
    # legomena (runs, models, k): every V_k of a run is one more point; failed runs (NaN) are left out
    three = np.stack([errors, errors, errors], axis=2)
    three[0, 1, 2] = np.nan
    got3 = expected_square_log_error(three, factors)
    assert got3[0] == pytest.approx(got[0], rel=0.05) and np.isfinite(got3[1])
    assert expected_square_log_error(np.full((4, 1), np.nan), factors[:4])[0] == np.inf


def test_evidence_weights_are_inverse_errors_shrunk_and_trimmed():
    factors = np.repeat([10.0, 4.0, 2.0], 6)
    x = np.log(factors)[:, None]
    slopes = np.array([0.001, -0.002, 0.03, 0.2])
    errors = np.expm1(x * slopes)
    w = evidence_weights(errors, factors)
    score = (slopes * np.log(10)) ** 2 + SHRINKAGE
    # two models both well under 2% at 10x share almost equally (shrinkage); a model 30x worse than the
    # best is trimmed; the others get 1 / score, renormalised
    assert w[0] == pytest.approx(w[1], rel=0.05)
    assert w[3] == 0 and score[3] > TRIM_FACTOR * score.min()
    kept = score <= TRIM_FACTOR * score.min()
    np.testing.assert_allclose(w[kept], (1 / score[kept]) / np.sum(1 / score[kept]))
    # an excluded model (misfit or degenerate) gets nothing; excluding every model excludes none
    w_excluded = evidence_weights(errors, factors, np.array([True, False, False, False]))
    assert w_excluded[0] == 0 and w_excluded.sum() == pytest.approx(1.0)
    np.testing.assert_allclose(evidence_weights(errors, factors, np.ones(4, dtype=bool)), w)
    # nothing known: equal weights
    np.testing.assert_allclose(evidence_weights(np.full((18, 2), np.nan), factors), [0.5, 0.5])


def test_a_misfit_beyond_three_times_the_best_fit_is_trimmed():
    np.testing.assert_array_equal(
        misfit_trimmed([0.5, 2.9, 3.1, np.nan]), [False, False, True, False]
    )  # best below 1: the bar is 3
    np.testing.assert_array_equal(misfit_trimmed([2.0, 5.9, 6.1]), [False, False, True])
    np.testing.assert_array_equal(misfit_trimmed([np.nan, np.nan]), [False, False])


def test_weights_are_recomputed_from_the_recorded_backtests(report):
    ensemble = report.recommended
    names = [f.name for f in ensemble.members]
    errors = {name: _random_errors(report, name) for name in names}
    runs = [r for r in report.runs if r.model == names[0] and r.kind == RANDOM]
    factors = report.tokens / np.array([r.fit_tokens for r in runs])
    misfit = []
    for name in names:
        g = report.fitted[name].goodness_of_fit
        misfit.append(g.statistic / g.df if g.statistic is not None and g.df else np.nan)
    # the rule as the page states it: misfit, degenerate, or perfect Zipf from the totals alone
    excluded = misfit_trimmed(misfit) | np.array(
        [report.fitted[n].degenerate is not None or n == "perfect_zipf_totals" for n in names]
    )
    for kind, weights in enumerate((ensemble.types_weights, ensemble.legomena_weights)):
        matrix = np.stack([errors[name][kind] for name in names], axis=1)
        np.testing.assert_allclose(weights, evidence_weights(matrix, factors, excluded), atol=1e-12)
        assert sum(weights) == pytest.approx(1.0)
        assert weights[names.index("perfect_zipf_totals")] == 0


def test_ensemble_rebuilt_from_its_dict_predicts_the_same(report, fzm_corpus):
    # The modelling service rebuilds the ensemble from the cached as_dict() output.
    data = json.loads(json.dumps(report.recommended.as_dict()))
    members = tuple(report.fitted[name] for name in data["weights"])
    rebuilt = Ensemble(
        members,
        tuple(w["types"] for w in data["weights"].values()),
        tuple(w["legomena"] for w in data["weights"].values()),
        int(data["tokens"]),
        report.recommended.band,
    )
    N = fzm_corpus.tokens
    assert rebuilt.types(10 * N) == report.recommended.types(10 * N)
    np.testing.assert_array_equal(rebuilt.spectrum(10 * N, 5), report.recommended.spectrum(10 * N, 5))


def test_recommended_is_the_weighted_average_with_a_widening_band(report, fzm_corpus):
    ensemble = report.recommended
    N = fzm_corpus.tokens
    for n in (N / 3, 10 * N, 1e9):
        average = sum(w * f.types(n) for w, f in zip(ensemble.types_weights, ensemble.members, strict=True))
        assert ensemble.types(n) == pytest.approx(average, rel=1e-12)
        assert ensemble.types_low(n) < ensemble.types(n) < ensemble.types_high(n)
    # Legomena: the types times the u-weighted mixture's shares, so that they never exceed the types.
    pairs = zip(ensemble.legomena_weights, ensemble.members, strict=True)
    spectra = sum(w * f.spectrum(10 * N, 5) for w, f in pairs)
    mixed_types = sum(
        w * f.types(10 * N) for w, f in zip(ensemble.legomena_weights, ensemble.members, strict=True)
    )
    np.testing.assert_allclose(
        ensemble.spectrum(10 * N, 5), ensemble.types(10 * N) * spectra / mixed_types, rtol=1e-12
    )
    widths = [ensemble.types_high(n) / ensemble.types_low(n) for n in (2 * N, 10 * N, 100 * N)]
    assert widths[0] < widths[1] < widths[2]
    # The band's factors are the backtest extrapolation factors N / (p N) for p = 0.5, 0.25, 0.1.
    np.testing.assert_allclose(
        ensemble.band.factors, [1 / p for p in sorted(FRACTIONS, reverse=True)], rtol=0.01
    )


def test_random_runs_are_reproducible_from_their_random_state(report, fzm_corpus):
    # The first random state thins each fraction in turn with one numpy Generator.
    random_runs = [r for r in report.runs if r.kind == RANDOM]
    assert len(random_runs) == len(RANDOM_STATES) * len(FRACTIONS) * len(MODELS)
    rng = np.random.default_rng(1)
    for p in (0.1, 0.25, 0.5):
        part = thin(fzm_corpus, p, rng)
        run = next(
            r
            for r in report.runs
            if r.kind == RANDOM and r.label == f"{p:g}" and r.draw == 1 and r.model == "sichel"
        )
        # predictions beyond the sample continue from its V, the model's growth scaled by the ratio of its
        # observed to expected hapaxes (app.core.anchored; the GIGP's E[V_1] is its own spectrum at the
        # sample's size, as its growth rate is E[V_1(n)] / n: Baayen 2001, ch. 2)
        fitted = MODELS["sichel"].fit(part)
        ratio = part.hapaxes / fitted.spectrum(part.tokens, 1)[0]
        predicted = part.types + ratio * (fitted.types(fzm_corpus.tokens) - fitted.types(part.tokens))
        assert run.fit_tokens == part.tokens
        assert run.types_error == pytest.approx(100 * (predicted / fzm_corpus.types - 1), rel=1e-7)


def test_text_order_runs_are_reported_but_do_not_change_the_weights(report, fzm_corpus, prefixes):
    text_runs = [r for r in report.runs if r.kind == TEXT_ORDER]
    assert {r.label for r in text_runs} == set(prefixes)
    assert {r.model for r in text_runs} == set(MODELS)
    without = backtest(fzm_corpus)
    np.testing.assert_allclose(without.recommended.types_weights, report.recommended.types_weights)


def test_report_serialises_to_json(report):
    data = json.loads(json.dumps(report.as_dict(), allow_nan=True))
    assert data["recommended"]["model"] == "recommended"
    assert set(data["fitted"]) == set(MODELS)
    assert {row["kind"] for row in data["summary"]} == {RANDOM, TEXT_ORDER}


def test_models_that_cannot_be_fitted_are_recorded_not_raised():
    # Only hapaxes: the perfect-Zipf fit needs 0 < V_1 < V (h(x) = 1 has no finite solution), so it fails on
    # the corpus and on every thinning; the report records why and leaves the model out of the ensemble.
    result = backtest(Spectrum.from_pairs([(1, 400)]), random_states=(1, 2))
    assert "V_1" in result.failures["perfect_zipf"]
    runs = [r for r in result.runs if r.model == "perfect_zipf"]
    assert runs and all(r.failure and np.isnan(r.types_error) for r in runs)
    names = [f.name for f in result.recommended.members]
    assert "perfect_zipf" not in names
    assert sum(result.recommended.types_weights) == pytest.approx(1.0)
    corpus = Spectrum.from_pairs([(1, 400)])
    assert Anchored(result.recommended, corpus).types(400) == pytest.approx(400, rel=1e-12)
