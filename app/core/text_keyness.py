"""Text-dispersion keyness: is a word more frequent in the texts of one corpus than in those of another?

Each text contributes one value per word, its relative frequency r = x / t (x occurrences in a text of t
tokens), and the two corpora's texts are compared word by word, with texts as the unit, so that a word one
text repeats many times does not count as typical of its corpus (pooled-count tests such as G^2 reward
it). Two tests, both two-sided and vectorised over every word:

- Mann-Whitney U (Mann & Whitney 1947) on the per-text relative frequencies, with ranks averaged over ties
  (all the texts without the word tie at the bottom), the normal approximation with the tie correction
      sigma^2 = n1 n2 / 12 ((n + 1) - sum_g (t_g^3 - t_g) / (n (n - 1)))
  over the tie groups g, and the continuity correction z = (max(U1, U2) - n1 n2 / 2 - 1/2) / sigma,
  p = min(1, 2 (1 - Phi(z))) (as scipy.stats.mannwhitneyu, method "asymptotic").
- Welch's t test (Welch 1947) of the mean relative frequency (``app.core.text_tests.welch_t``).

Both p-values are adjusted over all the words tested with Holm's (1979) method. A word is reported with its
frequency per million tokens in each corpus (pooled and as the mean over texts) and "in k of n texts".

Ranks are computed from the non-zero cells only: in a column with z zeros among n texts the zeros share
the rank (z + 1) / 2 and the non-zero values follow from z + 1 on, sorted once for all words together
(one lexsort of the non-zero cells), so the cost grows with the non-zero cells, not with words x texts.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.special import ndtr

from app.core.comparison import holm_adjust
from app.core.text_tests import as_text_matrix, welch_t

PER_MILLION = 1e6


@dataclass(frozen=True)
class TextKeyness:
    """Per word (column order): texts containing it (``in_texts_first`` of ``texts_first``, likewise for the
    second corpus), pooled and mean per-text frequency per million tokens, the Mann-Whitney U of the first
    corpus's texts (``u_first``; n1 n2 - u_first is the second's) with p and Holm-adjusted p, Welch's t
    (positive: higher mean relative frequency in the first corpus) with p and Holm-adjusted p."""

    texts_first: int
    texts_second: int
    in_texts_first: np.ndarray
    in_texts_second: np.ndarray
    per_million_first: np.ndarray
    per_million_second: np.ndarray
    mean_per_million_first: np.ndarray
    mean_per_million_second: np.ndarray
    u_first: np.ndarray
    p_mann_whitney: np.ndarray
    p_mann_whitney_holm: np.ndarray
    t: np.ndarray
    p_welch: np.ndarray
    p_welch_holm: np.ndarray


def _relative_frequencies(matrix: sp.csr_array) -> sp.csr_array:
    """r_iw = x_iw / t_i, row by row."""
    lengths = matrix.sum(axis=1).astype(float)
    rates = sp.csr_array(matrix, dtype=float)
    rates.data /= np.repeat(lengths, np.diff(rates.indptr))
    return rates


def mann_whitney_u(first_rates: sp.csr_array, second_rates: sp.csr_array) -> tuple[np.ndarray, np.ndarray]:
    """U of the first group and the two-sided asymptotic p-value (see the module docstring) for every
    column of two sparse texts x words matrices of non-negative values."""
    n1, n2 = first_rates.shape[0], second_rates.shape[0]
    n = n1 + n2
    both = sp.csc_array(sp.vstack([first_rates, second_rates]))
    words = both.shape[1]
    nonzero = np.diff(both.indptr)
    column = np.repeat(np.arange(words), nonzero)
    order = np.lexsort((both.data, column))
    values, column, in_first = both.data[order], column[order], both.indices[order] < n1
    zeros = n - nonzero
    new_tie = np.ones(values.size, dtype=bool)
    new_tie[1:] = (column[1:] != column[:-1]) | (values[1:] != values[:-1])
    tie = np.cumsum(new_tie) - 1
    tie_start = np.flatnonzero(new_tie)
    tie_size = np.diff(np.append(tie_start, values.size))
    # 1-based rank of a tie group's first member among all n values, then the group's average rank
    first_rank = zeros[column[tie_start]] + (tie_start - both.indptr[column[tie_start]]) + 1
    average_rank = first_rank + (tie_size - 1) / 2
    zeros_first = n1 - np.bincount(column[in_first], minlength=words)
    rank_sum = zeros_first * (zeros + 1) / 2 + np.bincount(
        column[in_first], average_rank[tie][in_first], minlength=words
    )
    u_first = rank_sum - n1 * (n1 + 1) / 2
    tie_term = (
        zeros.astype(float) ** 3
        - zeros
        + np.bincount(column[tie_start], tie_size.astype(float) ** 3 - tie_size, minlength=words)
    )
    sigma = np.sqrt(n1 * n2 / 12 * ((n + 1) - tie_term / (n * (n - 1))))
    with np.errstate(divide="ignore", invalid="ignore"):
        z = (np.maximum(u_first, n1 * n2 - u_first) - n1 * n2 / 2 - 0.5) / sigma
    return u_first, np.minimum(1.0, 2 * ndtr(-z))


def _mean_and_variance(rates: sp.csr_array) -> tuple[np.ndarray, np.ndarray]:
    """Mean and variance (n - 1 in the denominator) of every column over all the rows, zeros included."""
    texts = rates.shape[0]
    mean = rates.sum(axis=0) / texts
    squares = rates.multiply(rates).sum(axis=0)
    return mean, np.maximum(squares - texts * mean**2, 0.0) / (texts - 1)


def text_keyness(
    first_counts: sp.spmatrix | sp.sparray | np.ndarray,
    second_counts: sp.spmatrix | sp.sparray | np.ndarray,
) -> TextKeyness:
    """Keyness across texts of every word (column) of two corpora given as texts x words counts over the
    same columns; each corpus needs at least two texts. Which words to test (e.g. those of a minimum
    frequency) is the caller's choice: every column counts in the Holm adjustment."""
    first, second = as_text_matrix(first_counts), as_text_matrix(second_counts)
    if first.shape[1] != second.shape[1]:
        raise ValueError("the two corpora's counts need the same words (columns) in the same order")
    if first.shape[0] < 2 or second.shape[0] < 2:
        raise ValueError("keyness across texts needs at least two texts in each corpus")
    first_rates, second_rates = _relative_frequencies(first), _relative_frequencies(second)
    u_first, p_mann_whitney = mann_whitney_u(first_rates, second_rates)
    mean1, var1 = _mean_and_variance(first_rates)
    mean2, var2 = _mean_and_variance(second_rates)
    t, _, p_welch, _ = welch_t(mean1, var1, first.shape[0], mean2, var2, second.shape[0])
    return TextKeyness(
        texts_first=first.shape[0],
        texts_second=second.shape[0],
        in_texts_first=np.diff(sp.csc_array(first).indptr),
        in_texts_second=np.diff(sp.csc_array(second).indptr),
        per_million_first=first.sum(axis=0) / first.sum() * PER_MILLION,
        per_million_second=second.sum(axis=0) / second.sum() * PER_MILLION,
        mean_per_million_first=mean1 * PER_MILLION,
        mean_per_million_second=mean2 * PER_MILLION,
        u_first=u_first,
        p_mann_whitney=p_mann_whitney,
        p_mann_whitney_holm=holm_adjust(p_mann_whitney),
        t=t,
        p_welch=p_welch,
        p_welch_holm=holm_adjust(p_welch),
    )
