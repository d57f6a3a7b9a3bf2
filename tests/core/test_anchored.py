"""Predictions on both sides of the corpus size: exact below, the continued model beyond, no jump at N."""

from __future__ import annotations

import re
from collections import Counter

import numpy as np
import pytest
from scipy import stats

from app.core import planning
from app.core.anchored import Anchored, growth_slope, incoherence
from app.core.backtest import Ensemble, backtest
from app.core.models import MODELS
from app.core.spectrum import Spectrum
from tests.conftest import stdlib_docstrings
from tests.core.population_samples import power_law_density, stratified_population

CORPUS = Spectrum.from_pairs([(1, 900), (2, 260), (3, 120), (5, 60), (9, 30), (40, 8), (300, 2)])
JUMP = 1e-6
"""Largest relative jump at N allowed for V, V_1..V_5 and the new-type rate."""


@pytest.fixture(scope="module")
def docstring_spectrum() -> Spectrum:
    tokens = re.findall(r"[^\W\d_]+", stdlib_docstrings().lower())
    return Spectrum.from_frequencies(list(Counter(tokens).values()))


@pytest.fixture(scope="module")
def predictors(docstring_spectrum):
    """Every model of app.core.models fitted to the docstrings, the recommended ensemble, and an ensemble
    whose types and legomena are weighted differently (it does not obey the Poisson identity)."""
    report = backtest(docstring_spectrum, random_states=(1,), fractions=(0.5,))
    fitted = dict(report.fitted)
    assert set(fitted) == set(MODELS), report.failures
    mixed = Ensemble(
        (fitted["power_law"], fitted["sichel"]), (0.8, 0.2), (0.2, 0.8), docstring_spectrum.tokens
    )
    return fitted | {"recommended": report.recommended, "mixed weights": mixed}


class TruePopulation:
    """A closed population of word probabilities pi_i, as a predictor: its exact Poisson expectations
    E[V(n)] = sum_i (1 - exp(-n pi_i)) and E[V_k(n)] = sum_i poisson.pmf(k, n pi_i) (scipy.stats.poisson)."""

    name = "true population"

    def __init__(self, pi: np.ndarray, tokens: int) -> None:
        self.pi, self.tokens = pi, tokens

    def types(self, n):
        values = np.array([np.sum(-np.expm1(-x * self.pi)) for x in np.atleast_1d(n)])
        return float(values[0]) if np.ndim(n) == 0 else values

    def spectrum(self, n, k_max=20):
        return np.array([np.sum(stats.poisson.pmf(k, n * self.pi)) for k in range(1, k_max + 1)])


@pytest.fixture(scope="module")
def closed_population():
    """A finite Zipf-Mandelbrot population (density written out in tests.core.population_samples) and a
    Poisson sample of 20,000 tokens from it."""
    a, A, B = 0.5, 2e-6, 0.05
    pi = stratified_population(power_law_density(a, A, B), A, B)
    pi = pi / pi.sum()
    counts = np.random.default_rng(5).poisson(20_000 * pi)
    sample = Spectrum.from_frequencies(counts[counts > 0])
    return TruePopulation(pi, sample.tokens), sample


def test_interpolation_at_or_below_the_corpus_size_is_the_hypergeometric_expectation():
    # Reference: scipy.stats.hypergeom, E[V(n)] = sum_i (1 - pmf(0; N, f_i, n)), E[V_1(n)] = sum_i pmf(1; ...).
    anchored = Anchored(MODELS["perfect_zipf"].fit(CORPUS), CORPUS)
    N = CORPUS.tokens
    f = np.repeat(CORPUS.m, CORPUS.vm)
    for n in (10, N // 3, N):
        assert anchored.types(n) == pytest.approx(np.sum(1 - stats.hypergeom.pmf(0, N, f, n)), rel=1e-9)
        assert anchored.spectrum(n, 1)[0] == pytest.approx(np.sum(stats.hypergeom.pmf(1, N, f, n)), rel=1e-9)
    # between whole sizes the curve is linear (continuous and increasing, so planning can invert it)
    half = anchored.types(100.5)
    assert half == pytest.approx((anchored.types(100) + anchored.types(101)) / 2, rel=1e-12)


def test_the_slope_of_the_exact_interpolation_at_the_corpus_size_is_the_hapax_rate():
    # E[V(N)] - E[V(N - 1)] = V_1 / N; reference: scipy.stats.hypergeom at n = N - 1, type by type.
    N = CORPUS.tokens
    f = np.repeat(CORPUS.m, CORPUS.vm)
    below = np.sum(1 - stats.hypergeom.pmf(0, N, f, N - 1))
    assert CORPUS.types - below == pytest.approx(CORPUS.hapaxes / N, rel=1e-9)
    anchored = Anchored(MODELS["sichel"].fit(CORPUS), CORPUS)
    assert anchored.types(N) - anchored.types(N - 1) == pytest.approx(CORPUS.hapaxes / N, rel=1e-9)


@pytest.mark.parametrize("name", [*MODELS, "recommended", "mixed weights"])
def test_types_legomena_and_new_type_rate_are_continuous_at_the_corpus_size(
    predictors, docstring_spectrum, name
):
    """Just beyond N the continuation equals the exact interpolation at N: V, V_1..V_5 (at n = N the
    hypergeometric sample is the corpus itself; reference scipy.stats.hypergeom) and the slope, which just
    below N is E[V(N)] - E[V(N - 1)] (scipy.stats.hypergeom at n = N - 1)."""
    corpus = docstring_spectrum
    anchored = Anchored(predictors[name], corpus)
    N = corpus.tokens
    f = np.repeat(corpus.m, corpus.vm)
    at_n = np.array([np.sum(stats.hypergeom.pmf(k, N, f, N)) for k in range(1, 6)])
    just_beyond = N * (1 + 1e-9)
    assert abs(anchored.types(just_beyond) / corpus.types - 1) < JUMP
    np.testing.assert_array_less(np.abs(anchored.spectrum(just_beyond, 5) / at_n - 1), JUMP)
    slope_below = corpus.types - np.sum(1 - stats.hypergeom.pmf(0, N, f, N - 1))
    step = 1e-7 * N
    slope_beyond = (anchored.types(N + step) - anchored.types(N)) / step
    assert abs(slope_beyond / slope_below - 1) < 10 * JUMP  # the secant carries the curvature: step E'' / E'
    assert abs(planning.new_type_rate(anchored, just_beyond) / slope_below - 1) < JUMP


@pytest.mark.parametrize("name", [*MODELS, "recommended", "mixed weights"])
def test_the_new_type_rate_beyond_the_corpus_size_is_the_slope_positive_and_falling(
    predictors, docstring_spectrum, name
):
    """dV/dn = V_1(n) / n beyond N (the Poisson identity dE[V(n)]/dn = E[V_1(n)] / n, obtained by
    differentiating E[V(n)] = sum_i (1 - exp(-n pi_i)); Baayen 2001, ch. 2), positive and non-increasing up
    to 1000 N."""
    anchored = Anchored(predictors[name], docstring_spectrum)
    N = docstring_spectrum.tokens
    sizes = np.geomspace(N * 1.001, 1000 * N, 60)
    rates = np.array([planning.new_type_rate(anchored, n) for n in sizes])
    # positive while the model has unseen types; an exhausted finite population's rate underflows to 0,
    # and rounding in its last digits is allowed for
    assert rates[0] > 0 and np.all(rates >= 0)
    assert np.all(np.diff(rates) <= 1e-12 * rates[0])
    for n in sizes[::10]:
        secant = (anchored.types(n * (1 + 1e-6)) - anchored.types(n * (1 - 1e-6))) / (2e-6 * n)
        assert secant == pytest.approx(planning.new_type_rate(anchored, n), rel=1e-5)


@pytest.mark.parametrize("name", [*MODELS, "recommended", "mixed weights"])
def test_planning_is_monotone_and_a_target_above_the_corpus_is_planned_beyond_it(
    predictors, docstring_spectrum, name
):
    """A target just above the observed V (or a new-type rate just below V_1 / N) is reached after N, one
    just below it before N; larger targets need more tokens. (Before the continuation matched the rate at
    N, a rate target inside the jump at N was answered with a size below N.)"""
    anchored = Anchored(predictors[name], docstring_spectrum)
    N, V = docstring_spectrum.tokens, docstring_spectrum.types
    rate = docstring_spectrum.hapaxes / N
    assert planning.plan(anchored, planning.Target("types", V + 1)) > N
    assert planning.plan(anchored, planning.Target("types", V - 1)) < N
    assert planning.plan(anchored, planning.Target("new_type_rate", rate * (1 - 1e-4))) > N
    assert planning.plan(anchored, planning.Target("new_type_rate", rate * (1 + 1e-4))) < N
    for kind, targets in (
        ("types", np.linspace(V * 0.5, float(anchored.types(100 * N)), 12)),
        ("new_type_rate", np.geomspace(rate * 2, planning.new_type_rate(anchored, 100 * N), 12)),
    ):
        sizes = [planning.plan(anchored, planning.Target(kind, t)) for t in targets]
        assert np.all(np.diff(sizes) > 0), kind


@pytest.mark.parametrize("name", [*MODELS, "recommended", "mixed weights"])
def test_predictions_beyond_the_corpus_size_are_coherent_up_to_1000_times(
    predictors, docstring_spectrum, name
):
    """Any spectrum has V_k >= 0 and V_1 + ... + V_k <= V (the V_k count disjoint sets of types; Baayen
    2001, ch. 2), and a larger sample never holds fewer types than the corpus."""
    anchored = Anchored(predictors[name], docstring_spectrum)
    N = docstring_spectrum.tokens
    for n in np.geomspace(N * 1.0001, 1000 * N, 25):
        types, legomena = float(anchored.types(n)), anchored.spectrum(n, 20)
        assert incoherence(types, legomena) is None, n
        assert types >= docstring_spectrum.types


def test_a_model_that_fits_types_and_hapaxes_exactly_is_its_own_continuation():
    """Perfect Zipf reproduces V and V_1 at N (its closed-form fit), so continuing it at the observed hapax
    rate changes nothing: its types and hapaxes beyond N are the formula's, E(x) = W x ln x / (x - 1) and
    E_1(x) = W x (x - 1 - ln x) / (x - 1)^2 with x = n / Z (the perfect-Zipf model, written out here)."""
    fitted = MODELS["perfect_zipf"].fit(CORPUS)
    anchored = Anchored(fitted, CORPUS)
    Z, W = fitted.params["zipf_size"], fitted.params["zipf_types"]
    for n in (2 * CORPUS.tokens, 50 * CORPUS.tokens):
        x = n / Z
        assert anchored.types(n) == pytest.approx(W * x * np.log(x) / (x - 1), rel=1e-9)
        hapaxes = W * x * (x - 1 - np.log(x)) / (x - 1) ** 2
        assert anchored.spectrum(n, 1)[0] == pytest.approx(hapaxes, rel=1e-8)


def test_continuation_of_a_closed_population_by_its_own_expectations(closed_population):
    """With the true population as the model (a simulated closed population: its expectations are exact),
    the slope is its hapax curve, E'(n) = E[V_1(n)] / n = sum_i pi_i exp(-n pi_i) (scipy.stats.poisson), and
    the continuation grows by V_1 / E[V_1(N)] times the population's own growth."""
    truth, sample = closed_population
    N = sample.tokens
    for n in (N, 7 * N, 30 * N):
        assert float(growth_slope(truth, n)) * n == pytest.approx(truth.spectrum(n, 1)[0], rel=1e-8)
    anchored = Anchored(truth, sample)
    ratio = sample.hapaxes / truth.spectrum(N, 1)[0]
    for n in (3 * N, 100 * N):
        expected = sample.types + ratio * (truth.types(n) - truth.types(N))
        assert anchored.types(n) == pytest.approx(expected, rel=1e-8)
        assert incoherence(float(anchored.types(n)), anchored.spectrum(n, 20)) is None
    # the population is finite: the continuation levels off at V + ratio (S - E[V(N)])
    S = truth.pi.size
    assert anchored.population(S) == pytest.approx(sample.types + ratio * (S - truth.types(N)), rel=1e-12)
    assert anchored.types(1e6 * N) == pytest.approx(anchored.population(S), rel=1e-9)


def test_legomena_take_the_observed_shares_at_the_corpus_size_and_the_model_shares_far_beyond(
    predictors, docstring_spectrum
):
    """Among the types seen at least twice the continuation's V_k shares move from the corpus's (at N) to the
    model's own (as N / n -> 0)."""
    corpus = docstring_spectrum
    fitted = predictors["sichel"]
    anchored = Anchored(fitted, corpus)
    far = 1e5 * corpus.tokens
    mine = anchored.spectrum(far, 6)
    model = fitted.spectrum(far, 6)
    np.testing.assert_allclose(
        mine[1:] / (anchored.types(far) - mine[0]), model[1:] / (fitted.types(far) - model[0]), rtol=1e-4
    )
    observed = corpus.dense(6)
    np.testing.assert_allclose(anchored.spectrum(corpus.tokens * (1 + 1e-12), 6), observed, rtol=1e-9)


def test_incoherent_predictions_are_named():
    assert incoherence(100.0, np.array([50.0, 20.0, 10.0])) is None
    assert "V_1" in incoherence(100.0, np.array([120.0, 1.0]))
    assert "V_1 + ... + V_3" in incoherence(100.0, np.array([60.0, 30.0, 20.0]))
    assert "negative" in incoherence(100.0, np.array([-1.0]))
    assert "negative" in incoherence(float("nan"), np.array([1.0]))
