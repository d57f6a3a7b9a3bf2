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
of each corpus, and the log ratio effect size (Hardie 2014) with a confidence interval. A word's counts a and b
are taken as independent Poisson counts with rates a / N1 and b / N2; the log of their ratio has the
delta-method standard error sqrt(1/a + 1/b) (the Wald interval on the log scale for the ratio of two Poisson
rates; e.g. Rothman, Greenland & Lash, Modern Epidemiology, 3rd ed. 2008, ch. 14). A word seen in one corpus
only has no finite ratio: it is marked as occurring only there, and no ratio is made up for it (Hardie's 0.5
for a zero count would turn the other corpus's size into a "finding").
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
from app.core.models.base import RANGE_LEVEL, Z90
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
    """Log ratio log2((a / N1) / (b / N2)) (Hardie 2014): +1 means twice as frequent per token in corpus 1;
    NaN where a count is zero (the word occurs in one corpus only: no finite ratio)."""
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    both = (a > 0) & (b > 0)
    ratio = np.divide(a * n2, b * n1, out=np.full_like(a, np.nan), where=both)
    return np.log2(ratio, out=np.full_like(a, np.nan), where=both)


def log_ratio_interval(a: np.ndarray, b: np.ndarray, n1: int, n2: int) -> tuple[np.ndarray, np.ndarray]:
    """Nominal 90% interval of the log ratio (log2 units): log_ratio -+ z sqrt(1/a + 1/b) / ln 2, the Wald
    interval on the log scale for the ratio of two Poisson rates (standard error of a log rate ratio by the
    delta method, Rothman, Greenland & Lash 2008, ch. 14); NaN where a count is zero."""
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    both = (a > 0) & (b > 0)
    half = (
        Z90
        * np.sqrt(
            np.divide(1.0, a, out=np.full_like(a, np.nan), where=both)
            + np.divide(1.0, b, out=np.full_like(b, np.nan), where=both)
        )
        / math.log(2)
    )
    centre = log_ratio(a, b, n1, n2)
    return centre - half, centre + half


LOG_RATIO_LEVEL = RANGE_LEVEL
"""Nominal coverage of the log ratio's interval (the level of every range the program shows)."""

PER_MILLION = 1_000_000


@dataclass(frozen=True)
class DistinctiveWord:
    """One word's counts and per-million frequencies in both corpora, its G^2 with p (raw and Holm-adjusted
    over every word tested) and its log ratio (positive: more frequent in corpus 1) with its interval; a word
    seen in one corpus only has ``only_in`` (1 or 2) and no log ratio (None)."""

    word: str
    count1: int
    count2: int
    per_million1: float
    per_million2: float
    g2: float
    p: float
    p_holm: float
    log_ratio: float | None
    log_ratio_low: float | None
    log_ratio_high: float | None
    only_in: int | None


def _finite(value: float) -> float | None:
    return float(value) if math.isfinite(value) else None


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
    low, high = log_ratio_interval(a, b, n1, n2)
    order = np.argsort(-g2, kind="stable")[:limit]
    return [
        DistinctiveWord(
            words[i],
            int(a[i]),
            int(b[i]),
            PER_MILLION * int(a[i]) / n1,
            PER_MILLION * int(b[i]) / n2,
            float(g2[i]),
            float(p[i]),
            float(p_holm[i]),
            _finite(lr[i]),
            _finite(low[i]),
            _finite(high[i]),
            1 if b[i] == 0 else 2 if a[i] == 0 else None,
        )
        for i in order
    ]
