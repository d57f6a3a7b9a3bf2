"""Backtests and the recommended ensemble."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import stats

from app.core.backtest import (
    ANCHOR,
    EVIDENCE_Z,
    RANDOM,
    RANDOM_STATES,
    TEXT_ORDER,
    WEIGHT_FLOOR,
    Ensemble,
    anchored_weights,
    backtest,
    clearly_better,
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


def test_simulated_finite_zipf_mandelbrot_corpus_gives_that_model_the_largest_weight(report):
    ensemble = report.recommended
    names = [f.name for f in ensemble.members]
    assert names[int(np.argmax(ensemble.types_weights))] == "bounded_power_law"
    assert names[int(np.argmax(ensemble.legomena_weights))] == "bounded_power_law"


def _random_squares(report, name: str) -> tuple[np.ndarray, np.ndarray]:
    """Per random run (in run order): squared relative error of V, and mean squared error of V_1..V_5."""
    runs = [r for r in report.runs if r.model == name and r.kind == RANDOM]
    types = np.array([r.types_error / 100 for r in runs]) ** 2
    legomena = np.array([np.nanmean((np.array(r.legomena_errors) / 100) ** 2) for r in runs])
    return types, legomena


def test_weights_follow_the_anchored_rule(report):
    # Recomputed from the recorded random runs. A model joins perfect Zipf when its squared errors are
    # smaller by more than EVIDENCE_Z paired standard errors: the statistic of scipy.stats.ttest_rel on the
    # paired squared errors (the Diebold & Mariano 1995 comparison of two forecasts). Members share
    # w_j ~ 1 / (mean squared error + floor^2) (inverse-MSE weights, Bates & Granger 1969); others get 0.
    ensemble = report.recommended
    names = [f.name for f in ensemble.members]
    squares = {name: _random_squares(report, name) for name in names}
    for kind, weights in enumerate((ensemble.types_weights, ensemble.legomena_weights)):
        anchor = squares[ANCHOR][kind]
        joins = [
            name == ANCHOR or stats.ttest_rel(anchor, squares[name][kind]).statistic > EVIDENCE_Z
            for name in names
        ]
        mse = np.array([np.mean(squares[name][kind]) for name, j in zip(names, joins, strict=True) if j])
        expected = np.zeros(len(names))
        expected[joins] = (1 / (mse + WEIGHT_FLOOR**2)) / np.sum(1 / (mse + WEIGHT_FLOOR**2))
        np.testing.assert_allclose(weights, expected, rtol=1e-12, atol=1e-15)
        assert sum(weights) == pytest.approx(1.0)
    # The rule is not vacuous here: finite Zipf-Mandelbrot joins, Zipf-Mandelbrot (infinite population,
    # far off on a finite one) does not.
    fzm, zm = names.index("bounded_power_law"), names.index("power_law")
    assert ensemble.types_weights[fzm] > 0 and ensemble.types_weights[zm] == 0


def test_clearly_better_is_the_paired_t_statistic_against_the_threshold():
    # Reference: scipy.stats.ttest_rel(a, b).statistic = mean(a - b) / (sd(a - b) / sqrt(R)), sd with R - 1
    # degrees of freedom; "clearly better" means that statistic exceeds z. Runs with a NaN are dropped.
    rng = np.random.default_rng(3)
    decisions = set()
    for shift in np.linspace(0, 0.6, 13):
        a = rng.gamma(2.0, 1.0, 24) + shift
        b = a - shift + rng.normal(0, 0.5, 24)
        t = stats.ttest_rel(a, b).statistic
        assert clearly_better(a, b) == (t > EVIDENCE_Z)
        assert clearly_better(a, b, z=1.0) == (t > 1.0)
        decisions.add(bool(t > EVIDENCE_Z))
        a_nan = np.append(a, np.nan)
        assert clearly_better(a_nan, np.append(b, 1.0)) == clearly_better(a, b)
    assert decisions == {True, False}
    assert not clearly_better(np.array([1.0]), np.array([0.0]))


def test_anchored_weights_leave_out_models_not_clearly_better():
    # Three models over 30 runs: model 1 is clearly better than the anchor 0, model 2 clearly worse.
    # Expected weights: inverse-MSE (floor^2 added) over {0, 1}, zero for 2; with the best model as the
    # anchor it stands alone; without an anchor all three share.
    rng = np.random.default_rng(5)
    base = rng.uniform(0.002, 0.004, 30)
    squares = np.column_stack([base, base / 4 + rng.uniform(0, 1e-4, 30), base * 3])
    mse = squares.mean(axis=0)
    inverse = 1 / (mse + WEIGHT_FLOOR**2)
    np.testing.assert_allclose(
        anchored_weights(squares, 0), [inverse[0], inverse[1], 0] / inverse[:2].sum(), rtol=1e-12
    )
    np.testing.assert_allclose(anchored_weights(squares, 1), [0, 1, 0], atol=0)
    np.testing.assert_allclose(anchored_weights(squares, None), inverse / inverse.sum(), rtol=1e-12)


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
    spectra = sum(
        w * f.spectrum(10 * N, 5) for w, f in zip(ensemble.legomena_weights, ensemble.members, strict=True)
    )
    np.testing.assert_allclose(ensemble.spectrum(10 * N, 5), spectra, rtol=1e-12)
    widths = [ensemble.types_high(n) / ensemble.types_low(n) for n in (2 * N, 10 * N, 100 * N)]
    assert widths[0] < widths[1] < widths[2]
    # The band's factors are the backtest extrapolation factors N / (p N) for p = 0.5, 0.25, 0.1.
    np.testing.assert_allclose(ensemble.band.factors, [2, 4, 10], rtol=0.01)


def test_random_runs_are_reproducible_from_their_random_state(report, fzm_corpus):
    # The first random state thins each fraction in turn with one numpy Generator.
    random_runs = [r for r in report.runs if r.kind == RANDOM]
    assert len(random_runs) == len(RANDOM_STATES) * 3 * len(MODELS)
    rng = np.random.default_rng(1)
    for p in (0.1, 0.25, 0.5):
        part = thin(fzm_corpus, p, rng)
        run = next(
            r
            for r in report.runs
            if r.kind == RANDOM and r.label == f"{p:g}" and r.draw == 1 and r.model == "sichel"
        )
        predicted = MODELS["sichel"].fit(part).types(fzm_corpus.tokens)
        assert run.fit_tokens == part.tokens
        assert run.types_error == pytest.approx(100 * (predicted / fzm_corpus.types - 1), rel=1e-9)


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
    assert "perfect_zipf" not in [f.name for f in result.recommended.members]
    # Without the anchor every usable model is a member (inverse-MSE weights, all positive).
    assert all(w > 0 for w in result.recommended.types_weights)
    assert result.recommended.types(400) == pytest.approx(400, rel=0.01)
