"""Text-level comparison against scipy.stats (ttest_ind, permutation_test, hypergeom, nct, norm),
statsmodels' bias-corrected standardised mean difference and Holm correction, and a simulation with a known
answer (two halves of one collection of topic-clustered texts, split by texts)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.optimize import brentq
from scipy.stats import hypergeom, nct, norm, permutation_test, ttest_ind
from statsmodels.stats.meta_analysis import effectsize_smd
from statsmodels.stats.multitest import multipletests

from app.core.text_tests import (
    compare_texts,
    hedges_g,
    jackknife_pooled_types,
    pairwise_text_comparisons,
    pooled_types_test,
    types_per_text,
    welch_t,
    welch_test,
)
from app.core.text_tests import (
    permutation_test as text_permutation_test,
)
from tests.core.text_collections import topic_texts


def difference_of_means(x: np.ndarray, y: np.ndarray, axis: int = -1) -> np.ndarray:
    return np.mean(x, axis=axis) - np.mean(y, axis=axis)


def test_types_per_text_against_hypergeometric_sums_and_lists_short_texts() -> None:
    # reference: E[V(n)] = sum over types of 1 - P(type missed), the miss probability being
    # scipy.stats.hypergeom(N, f, n).pmf(0) for a type of frequency f (Baayen 2001, ch. 2)
    counts = np.array([[5, 3, 1, 1, 0, 2], [1, 1, 1, 0, 0, 0], [0, 9, 4, 1, 1, 1], [2, 0, 2, 0, 2, 2]])
    result = types_per_text(sp.csr_array(counts), 6)
    assert result.too_short == [1]  # 3 tokens < 6: listed, not dropped silently
    np.testing.assert_array_equal(result.texts, [0, 2, 3])
    for value, row in zip(result.types, counts[[0, 2, 3]], strict=True):
        f = row[row > 0]
        reference = sum(1 - hypergeom(int(row.sum()), int(x), 6).pmf(0) for x in f)
        assert value == pytest.approx(reference, rel=1e-12)
    assert result.mean == pytest.approx(np.mean(result.types))
    assert result.sd == pytest.approx(np.std(result.types, ddof=1))


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_welch_equals_scipy(seed: int) -> None:
    # reference: scipy.stats.ttest_ind(equal_var=False) (Welch 1947), its df and confidence_interval
    rng = np.random.default_rng(seed)
    x = rng.normal(100, 5, 12 + seed)
    y = rng.normal(103, 9, 21)
    ours = welch_test(x, y, level=0.9)
    reference = ttest_ind(x, y, equal_var=False)
    assert ours.statistic == pytest.approx(reference.statistic, rel=1e-12)
    assert ours.p == pytest.approx(reference.pvalue, rel=1e-10)
    assert ours.difference == pytest.approx(x.mean() - y.mean())
    interval = reference.confidence_interval(0.9)
    assert ours.low == pytest.approx(interval.low, rel=1e-10)
    assert ours.high == pytest.approx(interval.high, rel=1e-10)
    _, df, _, _ = welch_t(x.mean(), x.var(ddof=1), x.size, y.mean(), y.var(ddof=1), y.size)
    assert float(df) == pytest.approx(reference.df, rel=1e-12)


def test_welch_vectorised_without_spread() -> None:
    # no spread on either side: equal means give p = 1, different ones p = 0 (limit of a vanishing spread)
    t, _, p, _ = welch_t(np.array([2.0, 2.0]), np.zeros(2), 5, np.array([2.0, 3.0]), np.zeros(2), 4)
    np.testing.assert_array_equal(p, [1.0, 0.0])
    assert t[0] == 0 and t[1] == -np.inf


def test_permutation_exact_equals_scipy() -> None:
    # reference: scipy.stats.permutation_test(permutation_type="independent"), which enumerates all
    # C(13, 6) = 1716 splits when n_resamples exceeds them
    rng = np.random.default_rng(5)
    x, y = rng.normal(0, 1, 6), rng.normal(0.8, 1, 7)
    ours = text_permutation_test(x, y, resamples=9999)
    reference = permutation_test((x, y), difference_of_means, n_resamples=9999, vectorized=True)
    assert ours.p == pytest.approx(reference.pvalue, rel=1e-12)
    assert ours.statistic == pytest.approx(reference.statistic)


@pytest.mark.parametrize("seed", [0, 1])
def test_permutation_random_agrees_with_scipy(seed: int) -> None:
    # reference: scipy.stats.permutation_test with random permutations; both are Monte Carlo estimates of
    # one p-value, so they agree within a few binomial standard errors
    rng = np.random.default_rng(seed)
    x, y = rng.normal(0, 1, 40), rng.normal(0.15, 1.3, 35)
    resamples = 20000
    ours = text_permutation_test(x, y, resamples=resamples, rng=np.random.default_rng(10 + seed))
    reference = permutation_test(
        (x, y), difference_of_means, n_resamples=resamples, vectorized=True, rng=np.random.default_rng(99)
    ).pvalue
    tail = reference / 2  # two-sided: twice a tail share, each estimated from its own draws
    se = 2 * math.sqrt(2 * tail * (1 - tail) / resamples)
    assert 0.005 < reference < 0.99
    assert abs(ours.p - reference) < 4 * se


def test_hedges_g_against_statsmodels_and_noncentral_t() -> None:
    # reference: statsmodels.stats.meta_analysis.effectsize_smd (bias-corrected g, Borenstein et al. 2009);
    # its variance uses another approximation (Chen & Peace 2013), hence the looser tolerance. The exact
    # interval for d inverts the noncentral t distribution of the pooled t statistic (scipy.stats.nct).
    rng = np.random.default_rng(3)
    x, y = rng.normal(10, 2, 30), rng.normal(9, 2, 25)
    ours = hedges_g(x, y, level=0.9)
    g, var_g = effectsize_smd(x.mean(), x.std(ddof=1), x.size, y.mean(), y.std(ddof=1), y.size)
    assert ours.g == pytest.approx(g, rel=1e-12)
    z = 1.6448536269514722  # standard normal 95% quantile
    assert (ours.high - ours.low) / (2 * z) == pytest.approx(math.sqrt(var_g), rel=0.05)
    scale = math.sqrt(1 / x.size + 1 / y.size)
    t = ttest_ind(x, y).statistic
    df = x.size + y.size - 2
    low = brentq(lambda delta: nct.cdf(t, df, delta) - 0.95, -20, 20) * scale
    high = brentq(lambda delta: nct.cdf(t, df, delta) - 0.05, -20, 20) * scale
    assert ours.low == pytest.approx(low, abs=0.05)
    assert ours.high == pytest.approx(high, abs=0.05)


def direct_pooled_types(counts: np.ndarray, size: int) -> float:
    """E[V(size)] of pooled texts written out type by type: 1 - scipy.stats.hypergeom(N, f, size).pmf(0)
    summed over types (Baayen 2001, ch. 2) up to N, beyond it V + U(t), t = size / N - 1, with the
    Good-Toulmin U(t) = -sum_m (-t)^m V_m (Good & Toulmin 1956)."""
    f = counts.sum(axis=0)
    f = f[f > 0]
    total = int(f.sum())
    if size <= total:
        return float(np.sum(1 - hypergeom.pmf(0, total, f, size)))
    t = size / total - 1
    return f.size + float(np.sum(-((-t) ** f.astype(float))))


def test_jackknife_against_direct_computation() -> None:
    # reference: the delete-one jackknife standard error sqrt((T - 1) / T sum_i (theta_(i) - theta_(.))^2)
    # (Tukey 1958; Efron & Tibshirani 1993, eq. 11.5), every theta_(i) computed directly; at the corpus's
    # own size the corpora without one text are continued by Good-Toulmin
    rng = np.random.default_rng(6)
    counts = topic_texts(rng, 7, median_length=120).toarray()
    counts = counts[:, counts.sum(axis=0) > 0]
    for size in (300, int(counts.sum())):
        value, se = jackknife_pooled_types(sp.csr_array(counts), size)
        without = np.array([direct_pooled_types(np.delete(counts, i, axis=0), size) for i in range(7)])
        assert value == pytest.approx(direct_pooled_types(counts, size), rel=1e-10)
        assert se == pytest.approx(math.sqrt(6 / 7 * np.sum((without - without.mean()) ** 2)), rel=1e-8)


def test_pooled_test_equals_scipy_permutation_test_over_texts() -> None:
    # reference: scipy.stats.permutation_test(permutation_type="independent") over the texts' indices with
    # the difference of the pooled E[V(n)] as its statistic; C(9, 4) = 126 deals, all enumerated by both
    rng = np.random.default_rng(9)
    first, second = topic_texts(rng, 4).toarray(), topic_texts(rng, 5).toarray()
    size = int(min(first.sum(), second.sum()))
    both = np.vstack([first, second])

    def difference(x: np.ndarray, y: np.ndarray) -> float:
        return direct_pooled_types(both[x.astype(int)], size) - direct_pooled_types(both[y.astype(int)], size)

    ours = pooled_types_test(sp.csr_array(first), sp.csr_array(second), size, resamples=999, level=0.9)
    reference = permutation_test(
        (np.arange(4), np.arange(4, 9)), difference, n_resamples=999, vectorized=False
    )
    assert ours.p == pytest.approx(reference.pvalue, rel=1e-12)
    assert ours.difference == pytest.approx(reference.statistic, rel=1e-10)
    (_, se1), (_, se2) = (
        jackknife_pooled_types(sp.csr_array(first), size),
        jackknife_pooled_types(sp.csr_array(second), size),
    )
    assert ours.high - ours.difference == pytest.approx(norm.ppf(0.95) * math.hypot(se1, se2))


def test_pooled_test_refuses_texts_too_unequal_in_length() -> None:
    counts = np.array([[50, 40, 30, 20, 10] + [0] * 5, [0] * 5 + [2, 1, 1, 1, 1]])
    with pytest.raises(ValueError, match="too unequal"):
        jackknife_pooled_types(sp.csr_array(counts), 150)


def test_halves_of_one_collection_are_flagged_about_five_percent() -> None:
    # known answer: two halves of one kind of texts, split at random by texts, differ by chance only, so a
    # calibrated test at the 5% level flags about 5% of them (binomial sd 1.1% over 400 draws)
    rng = np.random.default_rng(2024)
    bank = topic_texts(rng, 1500)
    draws, flagged_welch, flagged_permutation = 400, 0, 0
    for _ in range(draws):
        chosen = rng.choice(bank.shape[0], 40, replace=False)
        richness = types_per_text(bank[chosen], 150)
        half = rng.permutation(richness.count)
        x, y = richness.types[half[: half.size // 2]], richness.types[half[half.size // 2 :]]
        flagged_welch += welch_test(x, y).p < 0.05
        flagged_permutation += text_permutation_test(x, y, 999, rng).p < 0.05
    assert 0.02 <= flagged_welch / draws <= 0.085
    assert 0.02 <= flagged_permutation / draws <= 0.085


def test_different_kinds_of_texts_are_told_apart() -> None:
    # known answer: texts with a larger topic vocabulary share (richer) against texts with a small one
    rng = np.random.default_rng(8)
    rich = topic_texts(rng, 30, topic_share=0.6, topic_words=3000)
    poor = topic_texts(rng, 30, topic_share=0.6, topic_words=100)
    result = compare_texts(rich, poor, 150, 8000, np.random.default_rng(0))
    assert result.welch.difference > 0
    assert max(t.p for t in result.tests) < 0.01
    assert result.effect.low > 0


@pytest.mark.parametrize(
    ("counts", "message"),
    [
        (np.array([[3, 1, 0]]), "two texts"),
        (np.array([[3, 1, 0], [0, 0, 0], [1, 1, 1]]), "at least one token"),
        (np.array([[3, -1, 0], [1, 1, 1]]), "non-negative"),
    ],
)
def test_bad_input_says_why(counts: np.ndarray, message: str) -> None:
    other = np.array([[2, 2, 2], [1, 3, 1]])
    with pytest.raises(ValueError, match=message):
        compare_texts(counts, other, 2, 4, np.random.default_rng(0))


def test_pairwise_comparisons_adjust_each_test_over_the_pairs() -> None:
    # reference: statsmodels' multipletests(method="holm") over the pairs, test by test (Holm 1979)
    rng = np.random.default_rng(12)
    corpora = [topic_texts(rng, 8, median_length=200), topic_texts(rng, 6, median_length=200)]
    corpora.append(topic_texts(rng, 7, median_length=200, topic_share=0.6, topic_words=60))
    pooled_size = int(min(c.sum() for c in corpora)) // 2
    pairs = pairwise_text_comparisons(corpora, ["a", "b", "c"], 100, pooled_size, np.random.default_rng(0))
    assert [(p.first, p.second) for p in pairs] == [("a", "b"), ("a", "c"), ("b", "c")]
    for k in range(3):
        raw = [p.comparison.tests[k].p for p in pairs]
        np.testing.assert_allclose([p.p_holm[k] for p in pairs], multipletests(raw, method="holm")[1])
    assert pairs[0].comparison.welch.texts_first == 8
