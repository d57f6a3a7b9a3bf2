"""Dispersion against the worked example of Gries (2008), the published formulas computed directly one word
and one text at a time, and scipy.stats.variation for Juilland's coefficient of variation."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.stats import variation

from app.core.dispersion import dispersion


def test_dp_of_the_worked_example() -> None:
    # from memory: Gries (2008) spreads a word over five corpus parts of 9, 10, 10, 10 and 11 tokens, 1, 2,
    # 3, 4 and 5 times, and finds DP = 0.18; DP_norm = 0.18 / (1 - 0.18) (Lijffijt & Gries 2012)
    sizes = np.array([9, 10, 10, 10, 11])
    word = np.array([1, 2, 3, 4, 5])
    counts = np.column_stack([word, sizes - word])  # the word and all other tokens
    result = dispersion(counts)
    assert result.dp[0] == pytest.approx(0.18, abs=1e-12)
    assert result.dp_norm[0] == pytest.approx(0.18 / 0.82, abs=1e-12)
    assert result.texts_with_word[0] == 5


def direct_dp(counts: np.ndarray) -> tuple[list[float], list[float]]:
    """DP and DP_norm written out word by word and text by text (Gries 2008; Lijffijt & Gries 2012)."""
    lengths = counts.sum(axis=1)
    total = lengths.sum()
    dp, dp_norm = [], []
    for w in range(counts.shape[1]):
        f = counts[:, w].sum()
        value = 0.5 * sum(abs(counts[i, w] / f - lengths[i] / total) for i in range(counts.shape[0]))
        dp.append(value)
        dp_norm.append(value / (1 - min(lengths) / total))
    return dp, dp_norm


def direct_juilland(counts: np.ndarray) -> list[float]:
    """D = 1 - V / sqrt(n - 1), V the coefficient of variation (population standard deviation) of the
    word's frequency per token over the n parts (Juilland & Chang-Rodríguez 1964); V from
    scipy.stats.variation."""
    rates = counts / counts.sum(axis=1, keepdims=True)
    n = counts.shape[0]
    return [1 - variation(rates[:, w]) / math.sqrt(n - 1) for w in range(counts.shape[1])]


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_against_direct_computation(seed: int) -> None:
    rng = np.random.default_rng(seed)
    counts = rng.poisson(rng.gamma(0.3, 2, (1, 40)) * rng.uniform(0.2, 3, (25, 1)))
    counts[:, 0] = 0
    counts[3, 0] = 7  # a word in one text only
    counts[:, 1] = counts.sum(axis=1) + 1  # a word spread in proportion to the texts' sizes (roughly)
    counts = counts[:, counts.sum(axis=0) > 0]
    result = dispersion(sp.csr_array(counts))
    dp, dp_norm = direct_dp(counts)
    np.testing.assert_allclose(result.dp, dp, atol=1e-12)
    np.testing.assert_allclose(result.dp_norm, dp_norm, atol=1e-12)
    np.testing.assert_allclose(result.juilland_d, direct_juilland(counts), atol=1e-10)
    np.testing.assert_array_equal(result.texts_with_word, (counts > 0).sum(axis=0))
    np.testing.assert_array_equal(result.frequency, counts.sum(axis=0))
    assert result.juilland_d[0] == pytest.approx(0.0, abs=1e-12)  # one text: D = 0
    assert result.dp[0] == pytest.approx(1 - counts[3].sum() / counts.sum())  # one text: DP = 1 - s_i


def test_limits_of_an_even_word_and_of_the_smallest_text() -> None:
    # formulas' limits: a word at the same rate in texts of equal size has DP = 0 and D = 1; a word only in
    # the smallest text has DP_norm = 1 (Lijffijt & Gries 2012)
    result = dispersion(np.array([[4, 6, 0], [4, 1, 0], [4, 3, 0], [2, 0, 1]]))
    even = dispersion(np.array([[3, 7], [3, 7], [3, 7]]))
    assert even.dp[0] == pytest.approx(0.0, abs=1e-12)
    assert even.juilland_d[0] == pytest.approx(1.0)
    assert result.dp_norm[2] == pytest.approx(1.0)


def test_needs_two_texts() -> None:
    with pytest.raises(ValueError, match="two texts"):
        dispersion(np.array([[1, 2, 3]]))
