"""Comparing two corpora as collections of texts: texts, not tokens, are the unit of every test here.

A corpus is given as its texts x words count matrix (any scipy.sparse matrix or 2-d array: row i holds the
count of every word in text i; the columns of two corpora need not match). Words cluster in texts (a topic
brings its words, a text repeats its names), so the spread between texts of one kind is far larger than
the spread between random token samples, and a test that treats tokens as independent draws flags
differences between two halves of one collection far too often. Here each text contributes one value.

- Richness of every text at a common text size n (``types_per_text``): the exact expected types of a
  random sample of n of its tokens, E[V(n)] = sum_m V_m (1 - C(N - m, n) / C(N, n)) over the text's own
  spectrum (``app.core.interpolation.expected_types``; Baayen 2001, ch. 2). Texts shorter than n have no
  value at n and are listed, not dropped silently.
- Welch's t test over texts (Welch 1947): t = (mean1 - mean2) / sqrt(s1^2 / n1 + s2^2 / n2) with the
  Welch-Satterthwaite degrees of freedom, and the range of the difference of means, difference -+ t_q se.
- A permutation test over texts (Fisher 1935; Pitman 1937): the difference of means against its values when
  the texts are dealt at random into groups of the same sizes.
- Hedges' g (Hedges 1981) with its normal-approximation range (Hedges & Olkin 1985).
- A bootstrap over texts of the whole corpus's E[V(n)] (Efron & Tibshirani 1993): texts are drawn with
  replacement and their counts pooled, and E[V(n)] of the pool is computed again.

Every range has the product's nominal level ``RANGE_LEVEL`` (90%); p-values are two-sided.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.special import ndtr, ndtri, stdtr, stdtrit

from app.core.interpolation import expected_types
from app.core.models.base import RANGE_LEVEL
from app.core.spectrum import Spectrum

PERMUTATIONS = 9999
"""Random permutations of a permutation test when the distinct splits of the texts are more than this."""
BOOTSTRAP_RESAMPLES = 999
"""Resamples of the bootstrap over texts."""


def as_text_matrix(counts: sp.spmatrix | sp.sparray | np.ndarray) -> sp.csr_array:
    """A corpus's texts x words counts as a CSR array of non-negative integers; every text needs a token."""
    matrix = sp.csr_array(counts)
    if matrix.ndim != 2:
        raise ValueError("the counts of a corpus need one row per text and one column per word")
    if matrix.nnz and (matrix.data.min() < 0 or np.any(matrix.data != np.round(matrix.data))):
        raise ValueError("word counts must be non-negative whole numbers")
    matrix = sp.csr_array(matrix.astype(np.int64))
    matrix.eliminate_zeros()
    if np.any(np.diff(matrix.indptr) == 0):
        raise ValueError("every text needs at least one token")
    return matrix


@dataclass(frozen=True)
class TextRichness:
    """E[V(size)] of every text holding at least ``size`` tokens (``types``, for the texts ``texts``, in text
    order), the texts shorter than ``size`` (``too_short``, indices into the corpus's texts), and the mean
    and standard deviation (n - 1 in the denominator; nan with fewer than two texts) of ``types``."""

    size: int
    types: np.ndarray
    texts: np.ndarray
    too_short: list[int]
    mean: float
    sd: float

    @property
    def count(self) -> int:
        """Texts with a value at ``size``."""
        return int(self.types.size)


def text_lengths(counts: sp.spmatrix | sp.sparray | np.ndarray) -> np.ndarray:
    """Tokens of every text."""
    return as_text_matrix(counts).sum(axis=1)


def types_per_text(counts: sp.spmatrix | sp.sparray | np.ndarray, size: int) -> TextRichness:
    """Exact expected types E[V(size)] of a random sample of ``size`` tokens of each text, from its own
    spectrum: E[V(n)] = sum_m V_m (1 - C(N - m, n) / C(N, n)) (Baayen 2001, ch. 2); texts of fewer than
    ``size`` tokens are returned in ``too_short``."""
    if size < 1:
        raise ValueError("the common text size must be at least one token")
    matrix = as_text_matrix(counts)
    lengths = matrix.sum(axis=1)
    kept = np.flatnonzero(lengths >= size)
    types = np.array(
        [
            expected_types(
                Spectrum.from_frequencies(matrix.data[matrix.indptr[i] : matrix.indptr[i + 1]]), size
            )
            for i in kept
        ]
    )
    mean = float(types.mean()) if types.size else math.nan
    sd = float(types.std(ddof=1)) if types.size > 1 else math.nan
    return TextRichness(int(size), types, kept, [int(i) for i in np.flatnonzero(lengths < size)], mean, sd)


@dataclass(frozen=True)
class TextTest:
    """One test between two corpora with texts as the unit.

    ``first`` and ``second`` are the two corpora's values of the statistic compared (the mean of a per-text
    value, or a whole corpus's value), ``difference`` = first - second, ``low`` and ``high`` the range of the
    difference at ``level`` (None where the method gives none), ``statistic`` the test statistic (t, the
    difference itself, or z), ``p`` the two-sided p-value, ``method`` the test in words, ``texts_first`` and
    ``texts_second`` the texts that entered it."""

    method: str
    first: float
    second: float
    difference: float
    statistic: float
    p: float
    low: float | None
    high: float | None
    level: float
    texts_first: int
    texts_second: int


def _need_two_texts(first: np.ndarray, second: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    first = np.asarray(first, dtype=float)
    second = np.asarray(second, dtype=float)
    if first.ndim != 1 or second.ndim != 1 or first.size < 2 or second.size < 2:
        raise ValueError("the text-level tests need at least two texts in each corpus")
    return first, second


def welch_t(
    mean1: np.ndarray,
    var1: np.ndarray,
    n1: np.ndarray | int,
    mean2: np.ndarray,
    var2: np.ndarray,
    n2: np.ndarray | int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Welch's (1947) t test from group means and variances (n - 1 in the denominator), vectorised:
    se^2 = var1 / n1 + var2 / n2, t = (mean1 - mean2) / se, degrees of freedom (Welch-Satterthwaite)
    df = se^4 / ((var1 / n1)^2 / (n1 - 1) + (var2 / n2)^2 / (n2 - 1)), two-sided p = 2 F_t(-|t|; df).

    Returns (t, df, p, se). With se = 0 (no spread on either side) t is 0 and p 1 when the means are equal,
    else t is infinite and p 0, as the limits of a vanishing spread."""
    a = np.asarray(var1, dtype=float) / n1
    b = np.asarray(var2, dtype=float) / n2
    difference = np.asarray(mean1, dtype=float) - np.asarray(mean2, dtype=float)
    se = np.sqrt(a + b)
    spread = se > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(spread, difference / se, np.where(difference == 0, 0.0, np.copysign(np.inf, difference)))
        df = np.where(
            spread, (a + b) ** 2 / (a**2 / (np.asarray(n1) - 1) + b**2 / (np.asarray(n2) - 1)), np.inf
        )
    p = np.where(np.isinf(t), 0.0, 2 * stdtr(df, -np.abs(np.where(np.isinf(t), 0.0, t))))
    return t, df, p, se


def welch_test(first: np.ndarray, second: np.ndarray, level: float = RANGE_LEVEL) -> TextTest:
    """Welch's t test of the per-text values of two corpora (``welch_t``), with the range of the difference
    of means, difference -+ t_{(1 + level) / 2; df} se."""
    first, second = _need_two_texts(first, second)
    t, df, p, se = welch_t(
        first.mean(), first.var(ddof=1), first.size, second.mean(), second.var(ddof=1), second.size
    )
    difference = float(first.mean() - second.mean())
    half = float(stdtrit(df, 0.5 + level / 2) * se) if se > 0 else 0.0
    return TextTest(
        "Welch's t test over texts",
        float(first.mean()),
        float(second.mean()),
        difference,
        float(t),
        float(p),
        difference - half,
        difference + half,
        level,
        first.size,
        second.size,
    )


def permutation_test(
    first: np.ndarray,
    second: np.ndarray,
    resamples: int = PERMUTATIONS,
    rng: np.random.Generator | None = None,
    level: float = RANGE_LEVEL,
) -> TextTest:
    """Permutation test of the difference of mean per-text values (Fisher 1935; Pitman 1937): the texts of
    both corpora are dealt at random into groups of the original sizes, and p is the share of deals whose
    difference is at least as far out as the observed one, two-sided as twice the smaller tail,
    p = min(1, 2 min(P(D* <= d), P(D* >= d))).

    All C(n1 + n2, n1) deals are enumerated when there are at most ``resamples`` of them (then the tails are
    exact shares), else ``resamples`` random deals with the (count + 1) / (resamples + 1) correction that
    keeps a random-deal p-value valid (Phipson & Smyth 2010). Deals within a relative 100 machine epsilon of
    the observed difference count as equal to it. No range is given (``low``, ``high`` are None)."""
    first, second = _need_two_texts(first, second)
    values = np.concatenate([first, second])
    n1, total = first.size, values.size
    observed = first.mean() - second.mean()
    splits = math.comb(total, n1)
    if splits <= resamples:
        chosen = np.array(list(itertools.combinations(range(total), n1)))
        first_sums = values[chosen].sum(axis=1)
        deals, adjustment = splits, 0
    else:
        rng = rng if rng is not None else np.random.default_rng()
        first_sums = np.concatenate(
            [
                rng.permuted(np.broadcast_to(values, (batch, total)), axis=1)[:, :n1].sum(axis=1)
                for batch in np.diff(np.append(np.arange(0, resamples, 1000), resamples))
            ]
        )
        deals, adjustment = resamples, 1
    null = first_sums / n1 - (values.sum() - first_sums) / (total - n1)
    tolerance = abs(observed) * 100 * np.finfo(float).eps
    below = (np.count_nonzero(null <= observed + tolerance) + adjustment) / (deals + adjustment)
    above = (np.count_nonzero(null >= observed - tolerance) + adjustment) / (deals + adjustment)
    return TextTest(
        "permutation test over texts (difference of means)",
        float(first.mean()),
        float(second.mean()),
        float(observed),
        float(observed),
        float(min(1.0, 2 * min(below, above))),
        None,
        None,
        level,
        first.size,
        second.size,
    )


@dataclass(frozen=True)
class EffectSize:
    """Hedges' g of the per-text values (positive: the first corpus higher) and its range at ``level``."""

    g: float
    low: float
    high: float
    level: float


def hedges_g(first: np.ndarray, second: np.ndarray, level: float = RANGE_LEVEL) -> EffectSize:
    """Hedges' (1981) g = J d, d = (mean1 - mean2) / s_pooled, s_pooled^2 = ((n1 - 1) s1^2 + (n2 - 1) s2^2)
    / (n1 + n2 - 2), small-sample correction J = 1 - 3 / (4 (n1 + n2 - 2) - 1); its variance
    J^2 ((n1 + n2) / (n1 n2) + d^2 / (2 (n1 + n2))) (Hedges & Olkin 1985, ch. 5; Borenstein et al. 2009,
    eqs. 4.20-4.24), and the normal range g -+ z se. Undefined (nan) when neither corpus has any spread."""
    first, second = _need_two_texts(first, second)
    n1, n2 = first.size, second.size
    df = n1 + n2 - 2
    pooled = math.sqrt(((n1 - 1) * first.var(ddof=1) + (n2 - 1) * second.var(ddof=1)) / df)
    if pooled == 0:
        return EffectSize(math.nan, math.nan, math.nan, level)
    d = (first.mean() - second.mean()) / pooled
    correction = 1 - 3 / (4 * df - 1)
    se = correction * math.sqrt((n1 + n2) / (n1 * n2) + d**2 / (2 * (n1 + n2)))
    z = float(ndtri(0.5 + level / 2))
    g = correction * d
    return EffectSize(float(g), float(g - z * se), float(g + z * se), level)


def _pooled_types(matrix: sp.csr_array, weights: np.ndarray, size: int) -> float:
    """E[V(size)] of the corpus made of every text i taken ``weights[i]`` times."""
    pooled = matrix.T @ weights
    return expected_types(Spectrum.from_frequencies(pooled[pooled > 0]), size)


def bootstrap_resample_weights(lengths: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """How often each text is drawn in one resample: texts drawn with replacement, one at a time, until the
    pool holds at least as many tokens as the corpus. With texts of equal length this is the ordinary
    bootstrap of T texts out of T; with unequal ones every resample still holds the corpus's size, so that
    E[V(n)] at any n up to it exists in every resample."""
    total = int(lengths.sum())
    draws = np.empty(0, dtype=np.int64)
    while lengths[draws].sum() < total:
        draws = np.concatenate([draws, rng.integers(0, lengths.size, lengths.size)])
    stop = int(np.searchsorted(np.cumsum(lengths[draws]), total)) + 1
    return np.bincount(draws[:stop], minlength=lengths.size)


def bootstrap_pooled_types(
    first_counts: sp.spmatrix | sp.sparray | np.ndarray,
    second_counts: sp.spmatrix | sp.sparray | np.ndarray,
    size: int,
    resamples: int = BOOTSTRAP_RESAMPLES,
    rng: np.random.Generator | None = None,
    level: float = RANGE_LEVEL,
) -> TextTest:
    """The whole corpus's E[V(size)] (its texts pooled, exact interpolation) compared with a bootstrap over
    texts (Efron & Tibshirani 1993, chs. 6 and 13): each corpus is resampled on its own
    (``bootstrap_resample_weights``), E[V(size)] computed on every pooled resample, and the difference d of
    the two corpora's values is tested with the bootstrap standard error se = sqrt(se1^2 + se2^2):
    z = d / se, p = 2 Phi(-|z|), range d -+ z_{(1 + level) / 2} se (the normal bootstrap interval).

    ``size`` must not exceed the tokens of either corpus."""
    first, second = as_text_matrix(first_counts), as_text_matrix(second_counts)
    if first.shape[0] < 2 or second.shape[0] < 2:
        raise ValueError("the text-level tests need at least two texts in each corpus")
    rng = rng if rng is not None else np.random.default_rng()
    values, spreads = [], []
    for matrix in (first, second):
        lengths = matrix.sum(axis=1)
        if size > lengths.sum():
            raise ValueError(f"common size {size} exceeds a corpus of {int(lengths.sum())} tokens")
        values.append(_pooled_types(matrix, np.ones(lengths.size, dtype=np.int64), size))
        replicates = [
            _pooled_types(matrix, bootstrap_resample_weights(lengths, rng), size) for _ in range(resamples)
        ]
        spreads.append(float(np.std(replicates, ddof=1)))
    difference = values[0] - values[1]
    se = math.hypot(*spreads)
    if se > 0:
        z = difference / se
    else:
        z = 0.0 if difference == 0 else math.copysign(math.inf, difference)
    half = float(ndtri(0.5 + level / 2)) * se
    return TextTest(
        f"bootstrap over texts of the whole corpus's E[V({size})]",
        values[0],
        values[1],
        difference,
        z,
        float(2 * ndtr(-abs(z))),
        difference - half,
        difference + half,
        level,
        first.shape[0],
        second.shape[0],
    )


@dataclass(frozen=True)
class TextComparison:
    """Everything the text-level comparison of two corpora holds: per-text richness at ``text_size`` on
    either side, Welch's and the permutation test of its means, Hedges' g, and the bootstrap of the whole
    corpora's E[V(pooled_size)]."""

    first: TextRichness
    second: TextRichness
    welch: TextTest
    permutation: TextTest
    effect: EffectSize
    bootstrap: TextTest

    @property
    def tests(self) -> list[TextTest]:
        """The three tests, per-text first."""
        return [self.welch, self.permutation, self.bootstrap]


def compare_texts(
    first_counts: sp.spmatrix | sp.sparray | np.ndarray,
    second_counts: sp.spmatrix | sp.sparray | np.ndarray,
    text_size: int,
    pooled_size: int,
    rng: np.random.Generator | None = None,
    permutations: int = PERMUTATIONS,
    resamples: int = BOOTSTRAP_RESAMPLES,
) -> TextComparison:
    """Text-level comparison of two corpora given as texts x words counts; ``text_size`` is the common size
    of the per-text richness, ``pooled_size`` that of the whole corpora (at most the smaller corpus).
    Each side needs at least two texts of ``text_size`` tokens or more."""
    rng = rng if rng is not None else np.random.default_rng()
    first = types_per_text(first_counts, text_size)
    second = types_per_text(second_counts, text_size)
    if first.count < 2 or second.count < 2:
        raise ValueError(
            f"the text-level tests need at least two texts of {text_size} tokens or more in each corpus "
            f"(here {first.count} and {second.count})"
        )
    return TextComparison(
        first,
        second,
        welch_test(first.types, second.types),
        permutation_test(first.types, second.types, permutations, rng),
        hedges_g(first.types, second.types),
        bootstrap_pooled_types(first_counts, second_counts, pooled_size, resamples, rng),
    )
