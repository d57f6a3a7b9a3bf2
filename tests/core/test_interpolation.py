"""Random-sample interpolation checked against scipy.stats.hypergeom, binomial limits and Monte Carlo.

``stdlib_docstring_tokens`` also feeds the richness and comparison tests: a corpus of real English text
that every Python installation carries (module docstrings of the standard library).
"""

from __future__ import annotations

import re
from fractions import Fraction
from functools import lru_cache

import numpy as np
import pytest
from scipy.stats import hypergeom, norm

from app.core.interpolation import (
    LOG_FLOOR,
    _log_miss,
    expected_spectrum,
    expected_spectrum_binomial,
    expected_types,
    expected_types_binomial,
    growth_band,
    prob_type_unseen,
    types_band,
    variance_types,
)
from app.core.models.base import Z90
from app.core.spectrum import Spectrum
from tests.conftest import stdlib_docstrings


@lru_cache(maxsize=1)
def stdlib_docstring_tokens() -> tuple[str, ...]:
    """Lower-cased letter runs of standard-library docstrings (``tests.conftest``), in a fixed order."""
    tokens = re.findall(r"[^\W\d_]+", stdlib_docstrings().lower())
    if len(tokens) < 5000:  # docstrings stripped (python -OO) or a very different standard library
        pytest.skip(f"only {len(tokens)} docstring tokens available")
    return tuple(tokens)


def token_ids(tokens: tuple[str, ...]) -> np.ndarray:
    """Type ids 0..V-1 of a token list, in text order."""
    return np.unique(np.array(tokens), return_inverse=True)[1]


def spectrum_of_ids(ids: np.ndarray) -> Spectrum:
    counts = np.bincount(ids)
    return Spectrum.from_frequencies(counts[counts > 0])


@pytest.fixture(scope="module")
def docstring_ids() -> np.ndarray:
    return token_ids(stdlib_docstring_tokens())


SMALL_FREQUENCIES = [1, 1, 1, 1, 2, 2, 3, 5, 8, 13, 40]  # a small corpus, N = 77


@pytest.mark.parametrize("n", [0, 1, 10, 38, 76, 77])
def test_expected_types_equals_hypergeom_type_by_type(n: int) -> None:
    # reference: scipy.stats.hypergeom, a type of frequency f is missed with pmf(0; N, f, n)
    spectrum = Spectrum.from_frequencies(SMALL_FREQUENCIES)
    N = sum(SMALL_FREQUENCIES)
    reference = sum(1 - hypergeom.pmf(0, N, f, n) for f in SMALL_FREQUENCIES)
    assert expected_types(spectrum, n) == pytest.approx(reference, rel=1e-12, abs=1e-12)


@pytest.mark.parametrize("n", [1, 10, 38, 76])
def test_expected_spectrum_equals_hypergeom_type_by_type(n: int) -> None:
    # reference: scipy.stats.hypergeom, a type of frequency f is seen k times with pmf(k; N, f, n)
    spectrum = Spectrum.from_frequencies(SMALL_FREQUENCIES)
    N = sum(SMALL_FREQUENCIES)
    reference = [sum(hypergeom.pmf(k, N, f, n) for f in SMALL_FREQUENCIES) for k in range(1, 16)]
    np.testing.assert_allclose(expected_spectrum(spectrum, n, 15), reference, rtol=1e-10, atol=1e-13)


def test_expected_spectrum_sums_to_expected_types(docstring_ids: np.ndarray) -> None:
    # identity: sum_k E[V_k(n)] = E[V(n)] and sum_k k E[V_k(n)] = n (Baayen 2001, ch. 2)
    spectrum = spectrum_of_ids(docstring_ids)
    n = spectrum.tokens // 3
    ev = expected_spectrum(spectrum, n, int(spectrum.m[-1]))
    assert ev.sum() == pytest.approx(expected_types(spectrum, n), rel=1e-10)
    assert np.dot(np.arange(1, ev.size + 1), ev) == pytest.approx(n, rel=1e-10)


def test_binomial_within_half_percent_of_exact_for_large_corpora(docstring_ids: np.ndarray) -> None:
    # the binomial form is the large-N limit of the hypergeometric one (Baayen 2001, ch. 2): at N >= 10^4
    # (the docstring corpus) V and the first five legomena must agree to 0.5% at every sample size
    spectrum = spectrum_of_ids(docstring_ids)
    N = spectrum.tokens
    if N < 10_000:
        pytest.skip(f"the docstring corpus has only {N} tokens here")
    for n in (N // 20, N // 4, N // 2, 9 * N // 10):
        assert expected_types_binomial(spectrum, n) == pytest.approx(expected_types(spectrum, n), rel=0.005)
        np.testing.assert_allclose(
            expected_spectrum_binomial(spectrum, n, 5), expected_spectrum(spectrum, n, 5), rtol=0.005
        )


def test_exact_variance_matches_monte_carlo() -> None:
    # reference: the empirical variance of 4000 random samples; its standard error is about
    # var * sqrt(2 / (R - 1)) for near-normal V, so 4 standard errors is a safe band
    rng = np.random.default_rng(11)
    frequencies = np.array(SMALL_FREQUENCIES * 4)
    tokens = np.repeat(np.arange(frequencies.size), frequencies)
    spectrum = Spectrum.from_frequencies(frequencies)
    n, reps = 60, 4000
    counts = [np.unique(rng.choice(tokens, n, replace=False)).size for _ in range(reps)]
    empirical = np.var(counts, ddof=1)
    exact = variance_types(spectrum, n)
    assert abs(empirical - exact) < 4 * exact * np.sqrt(2 / (reps - 1))
    assert np.mean(counts) == pytest.approx(expected_types(spectrum, n), abs=4 * np.sqrt(exact / reps))


def test_variance_is_zero_at_the_ends() -> None:
    spectrum = Spectrum.from_frequencies(SMALL_FREQUENCIES)
    assert variance_types(spectrum, 0) == 0.0
    assert variance_types(spectrum, spectrum.tokens) == 0.0


def test_random_samples_of_real_text_match_expected_types(docstring_ids: np.ndarray) -> None:
    # Monte Carlo on real text: 30 random 20% samples without replacement average to E[V(n)] within
    # 3 standard errors of their mean (standard error from the exact sd)
    rng = np.random.default_rng(2024)
    spectrum = spectrum_of_ids(docstring_ids)
    n = spectrum.tokens // 5
    band = types_band(spectrum, n)
    samples = [np.unique(rng.choice(docstring_ids, n, replace=False)).size for _ in range(30)]
    assert abs(np.mean(samples) - band.types) < 3 * band.sd / np.sqrt(30)


def test_90_percent_band_covers_about_90_percent_of_samples(docstring_ids: np.ndarray) -> None:
    # the normal 90% band around E[V(n)] (+-1.645 sd, scipy.stats.norm.ppf(0.95)) must cover 84-96% of 200
    # random 20% samples (binomial noise of 200 draws at 90% has a standard deviation of 2.1 points)
    rng = np.random.default_rng(99)
    spectrum = spectrum_of_ids(docstring_ids)
    n = spectrum.tokens // 5
    (band,) = growth_band(spectrum, np.array([n]))
    low, high = band.limits(Z90)
    assert Z90 == pytest.approx(norm.ppf(0.95), rel=1e-12)
    samples = np.array([np.unique(rng.choice(docstring_ids, n, replace=False)).size for _ in range(200)])
    coverage = np.mean((samples >= low) & (samples <= high))
    assert 0.84 <= coverage <= 0.96


def test_rejects_sizes_beyond_the_corpus() -> None:
    spectrum = Spectrum.from_frequencies(SMALL_FREQUENCIES)
    with pytest.raises(ValueError):
        expected_types(spectrum, spectrum.tokens + 1)


# Frequencies far beyond the dense cumulative sum (a corpus of 10^9 tokens, an absurd uniform design) take
# the piecewise Euler-Maclaurin route; the reference is mpmath's log-gamma at 40 significant digits:
# log C(N-m, n) / C(N, n) = lgamma(N-m+1) - lgamma(N-m-n+1) - lgamma(N+1) + lgamma(N-n+1).
@pytest.mark.parametrize(
    ("frequencies", "n_from_end"),
    [
        ([1, 5, 2**20 + 7, 3 * 10**8, 7 * 10**8], None),  # n = 1
        ([3, 2**21, 5 * 10**8, 5 * 10**8 + 7], None),
        ([10**9, 10**6 + 300], 10**9 + 300),  # m = 10^9 lies 300 tokens before the pole N - n
        ([2**20 + 3, 9_999_743, 10**7], 10**7 + 1),  # m = 10^7 lies one token before it
    ],
)
def test_miss_probability_of_huge_frequencies_matches_mpmath(
    frequencies: list[int], n_from_end: int | None
) -> None:
    mpmath = pytest.importorskip("mpmath")
    mpmath.mp.dps = 40
    spectrum = Spectrum.from_frequencies(np.array(frequencies))
    N = spectrum.tokens
    n = 1 if n_from_end is None else N - n_from_end
    got = _log_miss(N, n, spectrum.m)
    for m, value in zip(spectrum.m.tolist(), got, strict=True):
        reference = float(
            mpmath.loggamma(N - m + 1)
            - mpmath.loggamma(N - m - n + 1)
            - mpmath.loggamma(N + 1)
            + mpmath.loggamma(N - n + 1)
        )
        assert value == pytest.approx(reference, rel=1e-11), m


def test_miss_probability_beyond_the_sample_complement_is_zero() -> None:
    # C(N - m, n) = 0 when m > N - n: every sample of n tokens holds the type (scipy.stats.hypergeom agrees).
    spectrum = Spectrum.from_frequencies(np.array([10**9 - 5, 2]))
    N = spectrum.tokens
    unseen = dict(zip(spectrum.m.tolist(), prob_type_unseen(spectrum, 10).tolist(), strict=True))
    assert unseen[10**9 - 5] == 0.0 == hypergeom.pmf(0, N, 10**9 - 5, 10)
    # C(N-2, 10) / C(N, 10) = (N-10)(N-11) / (N(N-1)) exactly (scipy's log-gamma form is off by 2e-8 here).
    assert unseen[2] == pytest.approx(float(Fraction((N - 10) * (N - 11), N * (N - 1))), rel=1e-15)


# A corpus with very frequent types (frequencies up to 6e5 of N ~ 1.1e6): at these sample sizes the miss
# probabilities of the frequent types, and of most pair sums in the variance, underflow to 0 after a few
# thousand terms, where the floored cumulative sum stops.
FREQUENT = [600_000, 300_000, 120_000, 45_000, 9_000, 700, 120, 30, 7, 3, 2, 2] + [1] * 40


@pytest.mark.parametrize("n", [2, 500, 20_000, 400_000, 1_000_000])
def test_floored_miss_sum_changes_nothing_visible(n: int) -> None:
    spectrum = Spectrum.from_frequencies(np.array(FREQUENT))
    N = spectrum.tokens
    frequencies = np.concatenate([spectrum.m, 2 * spectrum.m, np.arange(1, 2 * spectrum.m[-1], 997)])
    full = _log_miss(N, n, frequencies)
    floored = _log_miss(N, n, frequencies, floor=LOG_FLOOR)
    # identical where the full sum stays above the floor, and below the floor wherever it does not
    above = full > LOG_FLOOR
    np.testing.assert_array_equal(floored[above], full[above])
    assert np.all(floored[~above] <= LOG_FLOOR)
    assert n < 20_000 or not above.all()  # the floor is reached in the larger samples (the fast path is used)
    np.testing.assert_array_equal(np.exp(floored), np.exp(full))


@pytest.mark.parametrize("n", [2, 500, 20_000, 400_000, 1_000_000])
def test_expected_types_and_variance_with_very_frequent_types_match_mpmath(n: int) -> None:
    # reference: miss probabilities C(N - f, n) / C(N, n) from mpmath's log-gamma at 40 digits (type by type,
    # and for two distinct types both missed, f_i + f_j); scipy.stats.hypergeom.pmf(0, ...) agrees to ~1e-8
    mpmath = pytest.importorskip("mpmath")
    mpmath.mp.dps = 40
    spectrum = Spectrum.from_frequencies(np.array(FREQUENT))
    N = spectrum.tokens

    def miss(f: int):
        if f > N - n:
            return mpmath.mpf(0)
        lg = mpmath.loggamma
        return mpmath.exp(lg(N - f + 1) - lg(N - f - n + 1) - lg(N + 1) + lg(N - n + 1))

    f = FREQUENT
    q = {x: miss(x) for x in set(f)}
    expected = sum(1 - q[x] for x in f)
    pair = {x + y: miss(x + y) for x in set(f) for y in set(f)}
    variance = sum(q[x] * (1 - q[x]) for x in f) + sum(
        pair[f[i] + f[j]] - q[f[i]] * q[f[j]] for i in range(len(f)) for j in range(len(f)) if i != j
    )
    assert expected_types(spectrum, n) == pytest.approx(float(expected), rel=1e-12)
    assert expected_types(spectrum, n) == pytest.approx(
        float(np.sum(1 - hypergeom.pmf(0, N, f, n))), rel=1e-7
    )
    assert variance_types(spectrum, n) == pytest.approx(float(variance), rel=1e-8, abs=1e-12)
    (band,) = growth_band(spectrum, np.array([n]))
    assert band.types == expected_types(spectrum, n)
    assert band.sd == pytest.approx(np.sqrt(variance_types(spectrum, n)), rel=1e-12)
