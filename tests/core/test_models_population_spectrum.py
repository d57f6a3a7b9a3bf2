"""The population-spectrum model (linear programming after Valiant & Valiant 2017)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from app.core.interpolation import expected_spectrum_binomial, expected_types_binomial
from app.core.models import MODELS
from app.core.models.population_spectrum import recover
from app.core.spectrum import Spectrum

MODEL = MODELS["population_spectrum"]


def _zipf_population(types: int, exponent: float) -> np.ndarray:
    """Relative frequencies p_r ~ r^-exponent, r = 1..types (scipy.stats.zipfian's pmf)."""
    return stats.zipfian.pmf(np.arange(1, types + 1), exponent, types)


@pytest.fixture(scope="module")
def population() -> np.ndarray:
    return _zipf_population(30_000, 1.05)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_recovered_spectrum_extrapolates_a_simulated_population_tenfold(population, seed):
    # Reference: simulation. 20,000 tokens drawn from a finite Zipf population (scipy.stats.zipfian, through
    # numpy's multinomial); the truth at 10x is E[V(n)] = sum_i (1 - (1 - p_i)^n) for n draws with
    # replacement. Tolerance 12% (ours: single samples of real texts miss by 5% in the median and up to about
    # 10% at 10x, benchmarks/accuracy.py); the truth lies between the lower and upper solutions.
    rng = np.random.default_rng(seed)
    n = 20_000
    counts = rng.multinomial(n, population)
    sample = Spectrum.from_frequencies(counts[counts > 0])
    fitted = MODEL.fit(sample)
    truth = float(np.sum(-np.expm1(10 * n * np.log1p(-population))))
    assert fitted.types(10 * n) == pytest.approx(truth, rel=0.12)
    lower = MODEL.expected_types(10 * n, fitted.params, "lower")
    upper = MODEL.expected_types(10 * n, fitted.params, "upper")
    assert lower < truth < upper


def test_fit_explains_the_observed_spectrum(population):
    # At the corpus size the histogram reproduces V and V_1..V_5 within a few Poisson standard deviations
    # (sd of V_m about sqrt(V_m) under Poisson sampling, Baayen 2001, ch. 3; 4 sd is common practice).
    counts = np.random.default_rng(7).multinomial(50_000, population)
    sample = Spectrum.from_frequencies(counts[counts > 0])
    fitted = MODEL.fit(sample)
    N = sample.tokens
    assert abs(fitted.types(N) - sample.types) < 4 * np.sqrt(sample.types)
    observed = sample.dense(5)
    np.testing.assert_array_less(np.abs(fitted.spectrum(N, 5) - observed), 4 * np.sqrt(observed) + 1)


def test_expectations_are_the_binomial_thinning_formulas_in_the_poisson_limit():
    # Reference: the exact binomial thinning formulas of a population of N' tokens (section 2 of the maths
    # notes): E[V(n)] = sum_m V_m (1 - (1-p)^m), E[V_k(n)] = sum_m V_m C(m,k) p^k (1-p)^(m-k), p = n / N'.
    # A histogram holding that population's types at their relative frequencies m / N' must agree up to
    # the Poisson approximation of the binomial (relative difference below 1e-3 for p <= 1e-3 here).
    population = Spectrum.from_pairs([(500, 40), (2_000, 10), (10_000, 3), (40_000, 2)])
    N_prime = population.tokens
    params = {
        "frequency": (population.m / N_prime).tolist(),
        "lower": population.vm.astype(float).tolist(),
        "upper": population.vm.astype(float).tolist(),
        "frequent_frequency": [],
        "frequent_types": [],
    }
    for n in (20.0, 100.0, 150.0):
        assert MODEL.expected_types(n, params) == pytest.approx(
            expected_types_binomial(population, n), rel=1e-3
        )
        np.testing.assert_allclose(
            MODEL.expected_spectrum(n, np.arange(1, 6), params),
            expected_spectrum_binomial(population, n, 5),
            rtol=2e-3,
        )


def test_lower_solution_has_no_more_types_than_the_upper_and_frequent_types_are_kept():
    counts = np.random.default_rng(3).multinomial(10_000, _zipf_population(5_000, 1.1))
    sample = Spectrum.from_frequencies(counts[counts > 0])
    pop = recover(sample, 20)
    assert pop.low.sum() <= pop.high.sum() + 1e-6
    # Types seen more than 20 times are kept as they are: their number and tokens are the sample's.
    frequent = sample.m > 20
    assert pop.frequent_types.sum() == sample.vm[frequent].sum()
    assert np.dot(pop.frequent_counts, pop.frequent_types) == np.dot(sample.m[frequent], sample.vm[frequent])


def test_bootstrap_samples_have_the_expected_size(population):
    # A sample of n tokens from the recovered histogram holds about n tokens and E[V(n)] types: the mean of
    # 40 draws within 4 standard errors (common practice for a simulation check).
    counts = np.random.default_rng(11).multinomial(20_000, population)
    fitted = MODEL.fit(Spectrum.from_frequencies(counts[counts > 0]))
    rng = np.random.default_rng(12)
    draws = [MODEL.sample_spectrum(20_000, fitted.params, rng) for _ in range(40)]
    types = np.array([d.types for d in draws])
    tokens = np.array([d.tokens for d in draws])
    assert abs(types.mean() - fitted.types(20_000)) < 4 * types.std(ddof=1) / np.sqrt(40)
    assert abs(tokens.mean() - 20_000) < 4 * tokens.std(ddof=1) / np.sqrt(40) + 0.01 * 20_000
