"""Planning (the inverse of prediction): round trips, a simulated population, Good-Turing at the corpus size."""

from __future__ import annotations

import re
from collections import Counter

import numpy as np
import pytest

from app.core import planning
from app.core.backtest import backtest
from app.core.models import MODELS
from app.core.spectrum import Spectrum
from tests.conftest import stdlib_docstrings
from tests.core.population_samples import power_law_density, stratified_population


@pytest.fixture(scope="module")
def docstring_spectrum() -> Spectrum:
    tokens = re.findall(r"[^\W\d_]+", stdlib_docstrings().lower())
    return Spectrum.from_frequencies(list(Counter(tokens).values()))


@pytest.fixture(scope="module")
def fitted(docstring_spectrum):
    report = backtest(docstring_spectrum, random_states=(1, 2))
    return dict(report.fitted) | {"recommended": report.recommended}


@pytest.mark.parametrize(
    "name", ["perfect_zipf", "heaps", "power_law", "bounded_power_law", "sichel", "recommended"]
)
def test_plan_inverts_the_forward_prediction(fitted, docstring_spectrum, name):
    """plan(types = predict(n).types) == n within 0.1% for n from N/10 to 100 N (round trip)."""
    predictor = fitted[name]
    population = None if name == "recommended" else predictor.model.population_size(predictor.params)
    N = docstring_spectrum.tokens
    for n in np.geomspace(N / 10, 100 * N, 7):
        types = float(predictor.types(n))
        if population is not None and types > population * (1 - 1e-9):
            continue  # saturated: every larger size gives the same types
        assert planning.plan(predictor, planning.Target("types", types), population) == pytest.approx(
            n, rel=1e-3
        )
        rate = planning.new_type_rate(predictor, n)
        assert planning.plan(predictor, planning.Target("new_type_rate", rate)) == pytest.approx(n, rel=1e-3)


def test_new_type_rate_at_corpus_size_is_good_turing(fitted, docstring_spectrum):
    """At N the models' E[V_1(N)] / N is the Good-Turing rate V_1 / N (Good 1953) within their fit error."""
    N, observed = docstring_spectrum.tokens, docstring_spectrum.hapaxes / docstring_spectrum.tokens
    for name in ("perfect_zipf", "bounded_power_law", "sichel", "recommended"):
        # perfect Zipf reproduces V_1 exactly; the population models within a few per cent (their chi-square residuals)
        assert planning.new_type_rate(fitted[name], N) == pytest.approx(observed, rel=0.05), name


def test_planned_coverage_is_reached_on_a_simulated_population():
    """A population from a known fZM law: fit a sample, plan coverage 0.99, draw a Poisson sample of that
    size from the population and measure its coverage (the probability mass of the types it holds)."""
    rng = np.random.default_rng(11)
    a, A, B = 0.5, 2e-6, 0.05
    pi = stratified_population(power_law_density(a, A, B), A, B)
    pi = pi / pi.sum()
    sample = rng.poisson(20_000 * pi)
    fitted = MODELS["bounded_power_law"].fit(Spectrum.from_frequencies(sample[sample > 0]))
    planned = planning.plan(fitted, planning.Target("coverage", 0.99))
    coverages = [pi[rng.poisson(planned * pi) > 0].sum() for _ in range(5)]
    # Tolerance: the fit from 20,000 tokens carries a few per cent of error in the rate (stated, common practice).
    assert np.mean(coverages) == pytest.approx(0.99, abs=0.003)


def test_unreachable_targets_say_why(fitted):
    pz = fitted["perfect_zipf"]
    with pytest.raises(planning.UnreachableTargetError, match="infinite") as refused:
        planning.plan(pz, planning.Target("share", 0.9))
    # the models to choose instead, named in words as the page's menu names them, never by their ids
    assert "bounded power law or Sichel mixture" in str(refused.value) and "_" not in str(refused.value)
    with pytest.raises(planning.UnreachableTargetError, match="a million billion tokens") as refused:
        planning.plan(pz, planning.Target("types", 1e16))
    assert "e+" not in str(refused.value)
    fzm = fitted["bounded_power_law"]
    population = fzm.model.population_size(fzm.params)
    with pytest.raises(planning.UnreachableTargetError, match="population"):
        planning.plan(fzm, planning.Target("types", 2 * population), population)
    with pytest.raises(planning.UnreachableTargetError):
        planning.Target("coverage", 1.5)


@pytest.mark.parametrize("name", [*MODELS, "recommended"])
def test_plan_inverts_the_anchored_prediction_on_both_sides_of_the_corpus_size(
    fitted, docstring_spectrum, name
):
    """What the service predicts (exact interpolation up to N, the anchored model beyond: app.core.anchored)
    is what it plans: plan(types = predict(n)) == n within 0.1% for n from N/50 to 1000 N.

    Reference below N: scipy.stats.hypergeom, E[V(n)] = sum_i (1 - hypergeom.pmf(0; N, f_i, n))."""
    from scipy import stats

    from app.core.anchored import Anchored

    if name not in fitted:
        pytest.skip(f"{name} could not be fitted to the docstrings")
    predictor = Anchored(fitted[name], docstring_spectrum)
    N = docstring_spectrum.tokens
    frequencies = np.repeat(docstring_spectrum.m, docstring_spectrum.vm)
    for n in np.rint(np.geomspace(N / 50, 1000 * N, 9)):
        types = float(predictor.types(n))
        if n <= N:
            exact = float(np.sum(1 - stats.hypergeom.pmf(0, N, frequencies, n)))
            assert types == pytest.approx(exact, rel=1e-9)
        if n > N and float(predictor.types(n)) - float(predictor.types(n / 1.001)) < 1e-6 * types:
            continue  # a finite population already exhausted: the types no longer identify the size
        assert planning.plan(predictor, planning.Target("types", types)) == pytest.approx(n, rel=1e-3)
