"""Corpus comparison against scipy.stats.chi2_contingency, statsmodels' Holm correction, hand-worked log
ratios, and simulations with a known answer (random halves of one text; different Zipf laws)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import chi2_contingency
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.rates import confint_poisson_2indep

from app.core.comparison import (
    distinctive_words,
    dunning_g2,
    holm_adjust,
    log_ratio,
    log_ratio_interval,
    pairwise_z_tests,
    population_variance_types,
    size_matched,
)
from app.core.interpolation import expected_spectrum, expected_types, variance_types
from app.core.spectrum import Spectrum
from tests.core.test_interpolation import spectrum_of_ids, stdlib_docstring_tokens, token_ids

# word counts a, b in two corpora of n1 = 5000 and n2 = 12000 tokens, zeros and extremes included
SAMPLE_TABLE = np.array([[0, 7], [7, 0], [1, 1], [25, 30], [300, 200], [4999, 11000], [120, 40], [3, 90]])
N1, N2 = 5000, 12000


def test_g2_equals_scipy_log_likelihood_on_every_row() -> None:
    # reference: scipy.stats.chi2_contingency(table, correction=False, lambda_="log-likelihood");
    # G^2 after Dunning (1993)
    ours = dunning_g2(SAMPLE_TABLE[:, 0], SAMPLE_TABLE[:, 1], N1, N2)
    for (a, b), g2 in zip(SAMPLE_TABLE, ours, strict=True):
        table = np.array([[a, b], [N1 - a, N2 - b]])
        reference = chi2_contingency(table, correction=False, lambda_="log-likelihood")[0]
        assert g2 == pytest.approx(reference, rel=1e-9, abs=1e-9)


def test_g2_is_zero_for_equal_rates() -> None:
    assert dunning_g2(np.array([50]), np.array([120]), N1, N2)[0] == pytest.approx(0.0, abs=1e-9)


def test_log_ratio_by_hand() -> None:
    # Hardie (2014): log2((a / N1) / (b / N2)); a zero count has no finite ratio (NaN, never a made-up one)
    assert log_ratio(np.array([20]), np.array([24]), N1, N2)[0] == pytest.approx(1.0)
    assert np.isnan(log_ratio(np.array([0]), np.array([3]), 1000, 1000)[0])
    assert np.isnan(log_ratio(np.array([4]), np.array([0]), 1000, 2000)[0])


def test_log_ratio_interval_equals_statsmodels_wald_interval_for_two_poisson_rates() -> None:
    # reference: statsmodels.stats.rates.confint_poisson_2indep(method="wald-log", compare="ratio"), the Wald
    # interval of log(rate1 / rate2) with standard error sqrt(1/a + 1/b); ours is in log2 units, 90%
    a, b = SAMPLE_TABLE[:, 0], SAMPLE_TABLE[:, 1]
    low, high = log_ratio_interval(a, b, N1, N2)
    for i, (x, y) in enumerate(SAMPLE_TABLE):
        if x == 0 or y == 0:
            assert np.isnan(low[i]) and np.isnan(high[i])
            continue
        ref_low, ref_high = confint_poisson_2indep(
            int(x), N1, int(y), N2, method="wald-log", compare="ratio", alpha=0.1
        )
        assert low[i] == pytest.approx(math.log2(ref_low), rel=1e-9)
        assert high[i] == pytest.approx(math.log2(ref_high), rel=1e-9)
    # by hand (20 per 1,000 against 24 per 2,400: twice the rate): 1 -+ 1.645 sqrt(1/20 + 1/24) / ln 2
    low, high = log_ratio_interval(np.array([20]), np.array([24]), 1000, 2400)
    half = 1.6448536 * math.sqrt(1 / 20 + 1 / 24) / math.log(2)
    assert (low[0], high[0]) == pytest.approx((1 - half, 1 + half), rel=1e-6)


@pytest.mark.parametrize("draw", [0, 1, 2])
def test_holm_equals_statsmodels(draw: int) -> None:
    # reference: statsmodels.stats.multitest.multipletests(method="holm") (Holm 1979)
    rng = np.random.default_rng(draw)
    p = np.concatenate([rng.uniform(0, 0.05, 8), rng.uniform(0, 1, 12), [0.01, 0.01, 1.0]])
    rng.shuffle(p)
    np.testing.assert_allclose(holm_adjust(p), multipletests(p, method="holm")[1], rtol=1e-12)


def test_pairwise_z_tests_by_hand_and_holm() -> None:
    # z = (E1 - E2) / sqrt(sd1^2 + sd2^2); two-sided normal p = erfc(|z| / sqrt(2))
    values, sds, labels = [100.0, 90.0, 99.0], [3.0, 4.0, 2.0], ["a", "b", "c"]
    rows = pairwise_z_tests(values, sds, labels)
    assert [(r.first, r.second) for r in rows] == [("a", "b"), ("a", "c"), ("b", "c")]
    assert rows[0].z == pytest.approx(10 / 5)
    assert rows[0].p == pytest.approx(math.erfc(2 / math.sqrt(2)))
    holm = multipletests([r.p for r in rows], method="holm")[1]
    np.testing.assert_allclose([r.p_holm for r in rows], holm)


def test_size_matched_values_are_the_exact_interpolation() -> None:
    ids = token_ids(stdlib_docstring_tokens())
    big = spectrum_of_ids(ids)
    small = spectrum_of_ids(ids[:3000])
    rows = size_matched([big, small], 3000)
    assert rows[0].types == pytest.approx(expected_types(big, 3000))
    assert rows[0].sd == pytest.approx(math.sqrt(variance_types(big, 3000)))
    assert [rows[0].hapaxes, rows[0].dis_legomena] == pytest.approx(list(expected_spectrum(big, 3000, 2)))
    # at its own size a corpus is its own only sample: no subsampling spread, but a population spread
    assert rows[1].types == small.types and rows[1].sd == 0.0 and rows[1].sd_population > 0
    with pytest.raises(ValueError):
        size_matched([big, small], 3001)


def test_population_variance_matches_simulated_corpora() -> None:
    # simulation with a known population: the variance of E[V(n0)] over 300 multinomial corpora of
    # N = 3000 tokens must match the mean estimate; the sample variance of 300 draws has a relative
    # standard error of sqrt(2 / 299) ~ 8%, so allow 25%
    rng = np.random.default_rng(1979)
    probabilities = 1 / np.arange(1, 20_001) ** 1.1
    probabilities /= probabilities.sum()
    n = 3000
    corpora = [rng.multinomial(n, probabilities) for _ in range(300)]
    spectra = [Spectrum.from_frequencies(c[c > 0]) for c in corpora]
    for n0 in (n, n // 4):
        values = [expected_types(s, n0) for s in spectra]
        estimates = [population_variance_types(s, n0) for s in spectra]
        assert np.mean(estimates) == pytest.approx(np.var(values, ddof=1), rel=0.25)


def test_random_halves_of_one_text_rarely_differ() -> None:
    # false-positive rate: two random halves of the shuffled docstring tokens come from the same population,
    # so at the 5% level about 5% of 50 splits may differ (allow up to 15%, i.e. 7 splits); the spread is
    # sd_population, since the subsampling sd of a corpus at its own size is zero
    rng = np.random.default_rng(1993)
    ids = token_ids(stdlib_docstring_tokens())
    half = ids.size // 2
    significant = 0
    for _ in range(50):
        shuffled = rng.permutation(ids)
        halves = [spectrum_of_ids(shuffled[:half]), spectrum_of_ids(shuffled[half:])]
        rows = size_matched(halves, half)
        (test,) = pairwise_z_tests([r.types for r in rows], [r.sd_population for r in rows], ["1", "2"])
        significant += test.p < 0.05
    assert significant <= 7


def zipf_corpus(rng: np.random.Generator, exponent: float, tokens: int) -> Spectrum:
    probabilities = 1 / np.arange(1, 50_001) ** exponent
    counts = rng.multinomial(tokens, probabilities / probabilities.sum())
    return Spectrum.from_frequencies(counts[counts > 0])


def test_different_zipf_laws_differ() -> None:
    # two corpora from Zipf laws with exponents 1.0 and 1.3 (the second far more repetitive) must differ
    # clearly at a common size, and two corpora from the same law must not
    rng = np.random.default_rng(1949)
    spectra = [zipf_corpus(rng, 1.0, 8000), zipf_corpus(rng, 1.3, 6000), zipf_corpus(rng, 1.0, 7000)]
    rows = size_matched(spectra, 6000)
    tests = pairwise_z_tests(
        [r.types for r in rows], [r.sd_population for r in rows], ["flat", "steep", "flat2"]
    )
    by_pair = {(t.first, t.second): t for t in tests}
    assert by_pair["flat", "steep"].p_holm < 1e-6 and by_pair["flat", "steep"].difference > 0
    assert by_pair["steep", "flat2"].p_holm < 1e-6
    assert by_pair["flat", "flat2"].p_holm > 0.05


def test_distinctive_words_rank_by_g2_and_filter_rare_words() -> None:
    counts1 = {"alpha": 60, "beta": 10, "gamma": 2, "delta": 30}
    counts2 = {"alpha": 20, "beta": 12, "delta": 30, "omega": 1}
    rows = distinctive_words(counts1, counts2, min_freq=5)
    assert {r.word for r in rows} == {"alpha", "beta", "delta"}  # gamma (2) and omega (1) are too rare
    g2 = [r.g2 for r in rows]
    assert g2 == sorted(g2, reverse=True)
    top = rows[0]
    assert top.word == "alpha" and top.log_ratio > 0
    n1, n2 = sum(counts1.values()), sum(counts2.values())
    reference = chi2_contingency([[60, 20], [n1 - 60, n2 - 20]], correction=False, lambda_="log-likelihood")
    assert top.g2 == pytest.approx(reference[0]) and top.p == pytest.approx(reference[1])
    assert [r.p_holm for r in rows] == pytest.approx(
        list(multipletests([r.p for r in rows], method="holm")[1])
    )
    assert len(distinctive_words(counts1, counts2, min_freq=5, limit=1)) == 1
    # per-million frequencies on each side: count / corpus tokens x 10^6
    assert (top.per_million1, top.per_million2) == pytest.approx((60e6 / n1, 20e6 / n2))


def test_words_of_one_corpus_only_are_marked_and_get_no_ratio() -> None:
    # 188 against 0 and 9 against 0: highly significant, but no finite ratio to headline
    counts1 = {"letters": 188, "tide": 9, "the": 500}
    counts2 = {"the": 480, "gull": 30}
    rows = {r.word: r for r in distinctive_words(counts1, counts2, min_freq=5)}
    assert rows["letters"].only_in == 1 and rows["gull"].only_in == 2 and rows["the"].only_in is None
    for word in ("letters", "tide", "gull"):
        row = rows[word]
        assert row.log_ratio is None and row.log_ratio_low is None and row.log_ratio_high is None
        assert row.p < 0.05
    the = rows["the"]
    assert the.log_ratio_low < the.log_ratio < the.log_ratio_high
