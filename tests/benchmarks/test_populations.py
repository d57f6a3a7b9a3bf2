"""The simulated populations of the accuracy benchmark against exact references."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from benchmarks.populations import (
    SIMULATED_KINDS,
    Mixture,
    Multinomial,
    SimonProcess,
    populations,
    zipf_mandelbrot,
)

DRAWS = 400


def _types_and_hapaxes(ids: np.ndarray) -> tuple[int, int]:
    counts = np.bincount(ids)
    return int(np.count_nonzero(counts)), int(np.count_nonzero(counts == 1))


def _within_monte_carlo_error(values: list[int], expected: float) -> bool:
    """The mean of the draws within 4 standard errors of the expectation (common practice for a
    simulation check)."""
    values = np.asarray(values, dtype=float)
    return abs(values.mean() - expected) < 4 * values.std(ddof=1) / np.sqrt(values.size)


def test_zipf_mandelbrot_probabilities():
    p = zipf_mandelbrot(4, 1.0, 1.0)
    # (r + 1)^-1 for r = 1..4: 1/2, 1/3, 1/4, 1/5, normalised (hand-computed)
    raw = np.array([1 / 2, 1 / 3, 1 / 4, 1 / 5])
    assert p == pytest.approx(raw / raw.sum(), rel=1e-12)
    assert zipf_mandelbrot(3, 0.0) == pytest.approx([1 / 3] * 3)


def test_multinomial_sample_has_the_textbook_expected_types_and_hapaxes():
    # Multinomial sampling of n tokens from probabilities p_i: a type is missing with probability
    # (1 - p_i)^n and seen once with probability n p_i (1 - p_i)^(n-1), so
    # E[V(n)] = sum_i (1 - (1 - p_i)^n) and E[V_1(n)] = sum_i n p_i (1 - p_i)^(n-1) (Baayen 2001, ch. 2;
    # Johnson & Kotz 1977, urn models; from memory). The per-type probabilities come from scipy's binomial.
    p = zipf_mandelbrot(1_500, 1.1, 2.0)
    population, n = Multinomial(p), 3_000
    reference_types = float(np.sum(1 - stats.binom.pmf(0, n, p)))
    reference_hapaxes = float(np.sum(stats.binom.pmf(1, n, p)))
    assert population.expected_types(n) == pytest.approx(reference_types, rel=1e-10)
    assert population.expected_hapaxes(n) == pytest.approx(reference_hapaxes, rel=1e-10)

    rng = np.random.default_rng(7)
    draws = [_types_and_hapaxes(population.draw(n, rng)) for _ in range(DRAWS)]
    assert all(len(population.draw(n, rng)) == n for _ in range(3))
    assert _within_monte_carlo_error([d[0] for d in draws], reference_types)
    assert _within_monte_carlo_error([d[1] for d in draws], reference_hapaxes)
    # The check can fail: the expectation for 5% more tokens is told apart.
    assert not _within_monte_carlo_error([d[0] for d in draws], population.expected_types(round(1.05 * n)))


def test_simon_process_grows_as_simon_1955():
    # Simon (1955): each token after the first is a new type with probability a, so E[V(n)] = 1 + a (n - 1);
    # the share of types seen once tends to 1 / (2 - a) (Simon 1955, eq. for f(1); from memory).
    a, n = 0.2, 2_000
    process = SimonProcess(a)
    assert process.expected_types(n) == 1 + a * (n - 1)
    large = 200_000
    assert process.expected_hapaxes(large) / process.expected_types(large) == pytest.approx(
        1 / (2 - a), rel=2e-3
    )

    rng = np.random.default_rng(11)
    wholes = [process.draw(n, rng) for _ in range(DRAWS)]
    assert all(ids.size == n and ids[0] == 0 for ids in wholes)
    # type ids in order of first appearance: each new id is one more than the largest before it
    assert all(np.array_equal(np.unique(ids), np.arange(ids.max() + 1)) for ids in wholes[:10])
    draws = [_types_and_hapaxes(ids) for ids in wholes]
    assert _within_monte_carlo_error([d[0] for d in draws], process.expected_types(n))
    assert _within_monte_carlo_error([d[1] for d in draws], process.expected_hapaxes(n))


def test_mixture_keeps_the_vocabularies_of_its_parts_apart():
    closed, open_part = Multinomial(zipf_mandelbrot(300, 0.0)), SimonProcess(0.3)
    mixture, n = Mixture(((0.6, closed), (0.4, open_part))), 2_000
    assert mixture.split(n) == [1_200, 800]
    # disjoint vocabularies: the expectations add up
    expected = closed.expected_types(1_200) + open_part.expected_types(800)
    assert mixture.expected_types(n) == pytest.approx(expected)
    rng = np.random.default_rng(3)
    draws = [_types_and_hapaxes(mixture.draw(n, rng)) for _ in range(DRAWS)]
    assert _within_monte_carlo_error([d[0] for d in draws], expected)
    assert _within_monte_carlo_error(
        [d[1] for d in draws], closed.expected_hapaxes(1_200) + open_part.expected_hapaxes(800)
    )


def test_every_kind_has_populations_with_distinct_names():
    found = populations()
    assert {p.kind for p in found} == set(SIMULATED_KINDS)
    assert len({p.name for p in found}) == len(found)
    for p in found:
        assert np.all(np.isfinite(p.source.expected_types(1_000)))
        if isinstance(p.source, Multinomial):
            assert p.source.probabilities.sum() == pytest.approx(1.0)
