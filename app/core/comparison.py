"""Comparing corpora fairly: size-matched vocabulary with z tests, and distinctive words.

Size matching (Baayen 2001, ch. 2): every corpus is interpolated to a common size n0 <= its own N, so that
type counts are compared at equal text length. Two spreads go with E[V(n0)]:

- ``sd``: the exact spread of V over random samples of n0 tokens of this very corpus (hypergeometric; zero at
  n0 = N). It describes the interpolated curve, not the corpus.
- ``sd_population``: the spread of E[V(n0)] itself over corpora of N tokens drawn at random from the same
  population, the one to use when asking whether two corpora differ. With Poisson counts f_i (mean N pi_i),
  E[V(n0)] ~ S = sum_i (1 - (1 - p)^f_i), p = n0 / N, has (Poisson generating function exp(-N pi (1 - s)) at
  s = 1 - p and (1 - p)^2)
      Var_Poisson S = sum_i exp(-(2 - p) n0 pi_i) - exp(-2 n0 pi_i) = E[V(2 n0)] - E[V((2 - p) n0)],
  and Cov(S, N) = sum_i n0 pi_i exp(-n0 pi_i) = E[V_1(n0)]. A corpus has a fixed size, so conditioning on N
  (regression on the total, Var N = N) gives
      Var S = E[V(2 n0)] - E[V((2 - p) n0)] - E[V_1(n0)]^2 / N.
  The expectations are estimated from the corpus: binomial interpolation up to N, and V + U(t) with the
  Good-Toulmin U(t), t = x / N - 1 <= 1, beyond. At n0 = N this is U(1) - V_1^2 / N.

Both spreads come from random-order sampling and understate the spread of real texts, whose words
cluster by topic.

Distinctive words: Dunning's (1993) log-likelihood G^2 on the 2x2 table of a word's count against the rest
of each corpus, and the log ratio effect size (Hardie 2014).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.special import chdtrc, ndtr, xlogy

from app.core.interpolation import (
    expected_spectrum,
    expected_spectrum_binomial,
    expected_types_binomial,
    types_band,
)
from app.core.spectrum import Spectrum
from app.core.unseen import good_toulmin_series


@dataclass(frozen=True)
class SizeMatched:
    """One corpus at the common size ``tokens``: expected types, their spreads, hapax and dis legomena."""

    tokens: int
    types: float
    sd: float
    sd_population: float
    hapaxes: float
    dis_legomena: float


def _population_expected_types(spectrum: Spectrum, x: float) -> float:
    """E[V(x)] of the population behind the corpus: binomial interpolation for x <= N, V + U(x / N - 1)
    (Good-Toulmin) above."""
    n = spectrum.tokens
    if x <= n:
        return expected_types_binomial(spectrum, x)
    return spectrum.types + good_toulmin_series(spectrum, x / n - 1)


def population_variance_types(spectrum: Spectrum, n0: int) -> float:
    """Var of E[V(n0)] over corpora of N tokens from the same population (see the module docstring):
    E[V(2 n0)] - E[V((2 - p) n0)] - E[V_1(n0)]^2 / N, p = n0 / N; needs n0 <= N (Good-Toulmin at t <= 1)."""
    n = spectrum.tokens
    if not 0 <= n0 <= n:
        raise ValueError(f"common size {n0} must lie between 0 and the corpus size {n}")
    if n0 == 0:
        return 0.0
    high = _population_expected_types(spectrum, 2 * n0)
    low = _population_expected_types(spectrum, (2 - n0 / n) * n0)
    hapaxes = float(expected_spectrum_binomial(spectrum, n0, 1)[0])
    return max(high - low - hapaxes**2 / n, 0.0)


def size_matched(spectra: Sequence[Spectrum], n0: int) -> list[SizeMatched]:
    """E[V(n0)], its two spreads, E[V_1(n0)] and E[V_2(n0)] for every corpus (exact interpolation).

    n0 must not exceed any corpus size; sizes beyond a corpus need a model (extrapolation), not this.
    """
    short = [s.tokens for s in spectra if s.tokens < n0]
    if n0 < 0 or short:
        raise ValueError(f"common size {n0} exceeds corpus sizes {short}; interpolation needs n0 <= every N")
    rows = []
    for spectrum in spectra:
        band = types_band(spectrum, n0)
        v1, v2 = expected_spectrum(spectrum, n0, 2)
        sd_pop = math.sqrt(population_variance_types(spectrum, n0))
        rows.append(SizeMatched(n0, band.types, band.sd, sd_pop, float(v1), float(v2)))
    return rows


def holm_adjust(p_values: Sequence[float] | np.ndarray) -> np.ndarray:
    """Holm's (1979) step-down adjusted p-values: sort ascending, p_(i) * (m - i + 1) for i = 1..m, running
    maximum, capped at 1, returned in the input order."""
    p = np.asarray(p_values, dtype=float)
    m = p.size
    order = np.argsort(p, kind="stable")
    stepped = np.minimum(1.0, np.maximum.accumulate(p[order] * (m - np.arange(m))))
    out = np.empty(m)
    out[order] = stepped
    return out


@dataclass(frozen=True)
class PairwiseTest:
    """z test of the difference between two size-matched values, with Holm-adjusted p over all pairs."""

    first: str
    second: str
    difference: float
    z: float
    p: float
    p_holm: float


def _z_and_p(difference: float, variance: float) -> tuple[float, float]:
    if variance > 0:
        z = difference / math.sqrt(variance)
    else:
        z = 0.0 if difference == 0 else math.copysign(math.inf, difference)
    return z, float(2 * ndtr(-abs(z)))  # two-sided normal p-value


def pairwise_z_tests(
    values: Sequence[float], sds: Sequence[float], labels: Sequence[str]
) -> list[PairwiseTest]:
    """z = (E1 - E2) / sqrt(sd1^2 + sd2^2) for every pair, two-sided p = 2 (1 - Phi(|z|)), and p adjusted for
    the number of pairs with Holm's method (Holm 1979)."""
    if not len(values) == len(sds) == len(labels):
        raise ValueError("values, sds and labels must have the same length")
    pairs = list(itertools.combinations(range(len(values)), 2))
    tests = [_z_and_p(values[i] - values[j], sds[i] ** 2 + sds[j] ** 2) for i, j in pairs]
    adjusted = holm_adjust([p for _, p in tests])
    return [
        PairwiseTest(labels[i], labels[j], values[i] - values[j], z, p, float(q))
        for (i, j), (z, p), q in zip(pairs, tests, adjusted, strict=True)
    ]


def dunning_g2(a: np.ndarray, b: np.ndarray, n1: int, n2: int) -> np.ndarray:
    """Log-likelihood G^2 = 2 sum O ln(O / E) on the 2x2 table [[a, b], [n1 - a, n2 - b]] (Dunning 1993), with
    E = row total x column total / (n1 + n2) and 0 ln 0 = 0; vectorised over words."""
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    total = n1 + n2
    word = a + b
    observed = (a, b, n1 - a, n2 - b)
    expected = (
        word * n1 / total,
        word * n2 / total,
        (total - word) * n1 / total,
        (total - word) * n2 / total,
    )
    # a cell with E = 0 has O = 0 and contributes 0 ln 0 = 0
    ratios = (
        np.divide(o, e, out=np.ones_like(o), where=e > 0) for o, e in zip(observed, expected, strict=True)
    )
    return 2 * sum(xlogy(o, r) for o, r in zip(observed, ratios, strict=True))


def log_ratio(a: np.ndarray, b: np.ndarray, n1: int, n2: int) -> np.ndarray:
    """Log ratio log2((a / N1) / (b / N2)), a zero count replaced by 0.5 (Hardie 2014): +1 means twice as
    frequent (per token) in corpus 1."""
    a = np.where(np.asarray(a) == 0, 0.5, a)
    b = np.where(np.asarray(b) == 0, 0.5, b)
    return np.log2((a / n1) / (b / n2))


@dataclass(frozen=True)
class DistinctiveWord:
    """One word's counts in both corpora, its G^2 with p (raw and Holm-adjusted over every word tested) and
    its log ratio (positive: more frequent in corpus 1)."""

    word: str
    count1: int
    count2: int
    g2: float
    p: float
    p_holm: float
    log_ratio: float


def distinctive_words(
    counts1: Mapping[str, int], counts2: Mapping[str, int], min_freq: int = 5, limit: int | None = None
) -> list[DistinctiveWord]:
    """Words whose rate differs between two corpora, by G^2 descending; only words seen at least ``min_freq``
    times in the two corpora together are tested (rarer words cannot reach significance anyway)."""
    n1, n2 = sum(counts1.values()), sum(counts2.values())
    if n1 == 0 or n2 == 0:
        raise ValueError("both corpora need at least one token")
    words = sorted(
        w for w in counts1.keys() | counts2.keys() if counts1.get(w, 0) + counts2.get(w, 0) >= min_freq
    )
    a = np.array([counts1.get(w, 0) for w in words], dtype=np.int64)
    b = np.array([counts2.get(w, 0) for w in words], dtype=np.int64)
    g2 = dunning_g2(a, b, n1, n2)
    p = chdtrc(1, g2)  # chi-square survival function, one degree of freedom
    p_holm = holm_adjust(p)
    lr = log_ratio(a, b, n1, n2)
    order = np.argsort(-g2, kind="stable")[:limit]
    return [
        DistinctiveWord(
            words[i], int(a[i]), int(b[i]), float(g2[i]), float(p[i]), float(p_holm[i]), float(lr[i])
        )
        for i in order
    ]
