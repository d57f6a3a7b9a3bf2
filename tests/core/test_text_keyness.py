"""Keyness across texts against scipy.stats.mannwhitneyu and scipy.stats.ttest_ind(equal_var=False) word by
word, statsmodels' Holm correction, and a simulation with a known answer (a word one text repeats)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.stats import mannwhitneyu, ttest_ind
from statsmodels.stats.multitest import multipletests

from app.core.text_keyness import text_keyness
from tests.core.text_collections import topic_texts


def two_corpora(seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    first = topic_texts(rng, 23, median_length=150).toarray()
    second = topic_texts(rng, 17, median_length=150).toarray()
    keep = (first.sum(axis=0) + second.sum(axis=0)) >= 3
    first, second = first[:, keep], second[:, keep]
    first[:, 0] = 0  # a word absent from the first corpus
    first[:, 1] = 5  # a word at the same count in every text of the first corpus (ties of non-zero values)
    return first, second


@pytest.mark.parametrize("seed", [0, 1])
def test_equals_scipy_word_by_word(seed: int) -> None:
    # reference: scipy.stats.mannwhitneyu(method="asymptotic", use_continuity=True), scipy.stats.ttest_ind
    # (equal_var=False) on the per-text relative frequencies, statsmodels' multipletests(method="holm")
    first, second = two_corpora(seed)
    ours = text_keyness(sp.csr_array(first), sp.csr_array(second))
    rates1 = first / first.sum(axis=1, keepdims=True)
    rates2 = second / second.sum(axis=1, keepdims=True)
    mwu = mannwhitneyu(rates1, rates2, axis=0, method="asymptotic")
    np.testing.assert_allclose(ours.u_first, mwu.statistic, rtol=1e-12)
    np.testing.assert_allclose(ours.p_mann_whitney, mwu.pvalue, rtol=1e-9, atol=1e-15)
    welch = ttest_ind(rates1, rates2, axis=0, equal_var=False)
    np.testing.assert_allclose(ours.t, welch.statistic, rtol=1e-9)
    np.testing.assert_allclose(ours.p_welch, welch.pvalue, rtol=1e-8, atol=1e-15)
    np.testing.assert_allclose(ours.p_welch_holm, multipletests(welch.pvalue, method="holm")[1], rtol=1e-8)
    np.testing.assert_allclose(
        ours.p_mann_whitney_holm, multipletests(mwu.pvalue, method="holm")[1], rtol=1e-8
    )
    np.testing.assert_array_equal(ours.in_texts_first, (first > 0).sum(axis=0))
    np.testing.assert_array_equal(ours.in_texts_second, (second > 0).sum(axis=0))
    assert (ours.texts_first, ours.texts_second) == (23, 17)
    np.testing.assert_allclose(ours.per_million_second, second.sum(axis=0) / second.sum() * 1e6)
    np.testing.assert_allclose(ours.mean_per_million_first, rates1.mean(axis=0) * 1e6)


def test_a_word_one_text_repeats_is_not_key() -> None:
    # known answer: a word that one text of the first corpus repeats 60 times is far more frequent there in
    # pooled counts, but not typical of the corpus's texts; a word used a little in every text of it is
    rng = np.random.default_rng(3)
    first = topic_texts(rng, 30, median_length=300).toarray()
    second = topic_texts(rng, 30, median_length=300).toarray()
    first[0, -1], second[:, -1] = 60, 0
    first[:, -2], second[:, -2] = rng.integers(1, 4, 30), 0
    ours = text_keyness(first, second)
    assert ours.in_texts_first[-1] == 1 and ours.p_mann_whitney[-1] > 0.3 and ours.p_welch[-1] > 0.3
    assert ours.p_mann_whitney_holm[-2] < 1e-6


def test_columns_must_match() -> None:
    with pytest.raises(ValueError, match="same words"):
        text_keyness(np.ones((3, 4)), np.ones((3, 5)))


def test_a_word_absent_from_both_corpora_is_not_key() -> None:
    # scipy.stats.mannwhitneyu gives p = 1 when every value ties; Welch's t has no spread to divide by and
    # takes its limit (equal means: p = 1)
    first = np.array([[3, 0, 1], [2, 0, 2], [1, 0, 5]])
    second = np.array([[1, 0, 1], [4, 0, 1]])
    ours = text_keyness(first, second)
    assert mannwhitneyu([0.0] * 3, [0.0] * 2, method="asymptotic").pvalue == 1.0
    assert ours.p_mann_whitney[1] == 1.0 and ours.p_welch[1] == 1.0
    assert ours.in_texts_first[1] == 0 and ours.in_texts_second[1] == 0
