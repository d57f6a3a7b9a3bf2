"""Expected vocabulary of random samples of a known corpus (interpolation, n <= N).

Only the frequency spectrum is needed. A sample of n of the N tokens drawn without replacement
misses a type of frequency m with the hypergeometric probability C(N-m, n) / C(N, n), and holds it
exactly k times with probability C(m, k) C(N-m, n-k) / C(N, n) (scipy.stats.hypergeom pmf at 0 and k;
Baayen 2001, ch. 2). Hence

    E[V(n)]   = sum_m V_m (1 - C(N-m, n) / C(N, n))
    E[V_k(n)] = sum_m V_m C(m, k) C(N-m, n-k) / C(N, n)

The binomial form replaces sampling without replacement by keeping each token with probability
p = n / N: E[V(n)] = sum_m V_m (1 - (1-p)^m), E[V_k(n)] = sum_m V_m C(m,k) p^k (1-p)^(m-k).
All binomial coefficients are handled in log-gamma arithmetic.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import gammaln

from app.core.spectrum import Spectrum


def _log_choose(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """log C(a, b) for arrays, -inf where b < 0 or b > a."""
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    valid = (b >= 0) & (b <= a)
    with np.errstate(invalid="ignore"):
        out = gammaln(a + 1) - gammaln(b + 1) - gammaln(a - b + 1)
    return np.where(valid, out, -np.inf)


def _check_size(spectrum: Spectrum, n: float) -> int:
    N = spectrum.tokens
    if not 0 <= n <= N:
        raise ValueError(f"sample size {n} must lie between 0 and the corpus size {N}")
    return N


DENSE_TERMS = 1 << 20
"""Terms of ``_log_miss`` summed one by one (an array of this many floats); beyond, in pieces."""
DIRECT_TERMS = 256
"""Pieces shorter than this, or this close to the pole at j = N - n, are summed term by term."""
MAX_DENSE_TERMS = 1 << 25
"""Beyond ``DENSE_TERMS``, terms are still summed one by one when the frequencies asked for are at least one
per ``DIRECT_TERMS`` terms on average, up to this many (an array of 256 MB)."""


LOG_FLOOR = -800.0
"""exp of anything below this is 0 in double precision (the smallest subnormal is about exp(-745))."""


def _log_miss(N: int, n: int, m: np.ndarray, floor: float | None = None) -> np.ndarray:
    """log C(N - m, n) / C(N, n) = sum_{j<m} log(1 - n / (N - j)), -inf where m > N - n.

    Summed term by term (cumulatively up to the largest m, or up to ``DENSE_TERMS``) instead of as a
    difference of log-gamma values, which would lose about eps * N log N in absolute terms and spoil
    E[V(n)] at small n on huge corpora. Frequencies beyond ``DENSE_TERMS`` (only in corpora of many
    millions of tokens, or absurd designs) continue from there term by term when they lie close together,
    else in pieces (``_sum_log_miss_pieces``), so memory and time stay bounded whatever m.

    With a ``floor`` (callers that only need exp of the result): every term is at most log(1 - n / N) < 0,
    so the cumulative sum has passed the floor after J = ceil(floor / log(1 - n / N)) terms; it stops there
    and any larger reachable m gets the sum of those J terms, a value <= floor like the true one. With the
    floor at ``LOG_FLOOR`` both exponentiate to exactly 0, and the cost is O(min(max m, 800 N / n)).
    """
    m = np.asarray(m, dtype=np.int64)
    if m.size == 0:
        return np.zeros(0)
    reachable = m <= N - n
    clipped = np.minimum(m, N - n)
    top = int(clipped.max())
    if floor is not None and 0 < n < N:
        top = min(top, int(np.ceil(floor / np.log1p(-n / N))))  # terms after which the sum is <= floor
        clipped = np.minimum(clipped, top)
    dense_top = min(top, DENSE_TERMS)
    far = clipped > dense_top
    if top <= MAX_DENSE_TERMS and np.count_nonzero(far) * DIRECT_TERMS >= top - dense_top:
        dense_top = top  # frequencies packed closely (the pair sums of a large spectrum): one cumulative sum
        far = np.zeros_like(far)
    j = np.arange(dense_top, dtype=float)
    cumulative = np.concatenate([[0.0], np.cumsum(np.log1p(-n / (N - j)))])
    values = cumulative[np.minimum(clipped, dense_top)]
    if far.any():
        stops = np.unique(clipped[far])
        starts = np.concatenate([[dense_top], stops[:-1]])
        sums = cumulative[-1] + np.cumsum(_sum_log_miss_pieces(N, n, starts, stops))
        values[far] = sums[np.searchsorted(stops, clipped[far])]
    return np.where(reachable, values, -np.inf)


def _sum_log_miss_pieces(N: int, n: int, starts: np.ndarray, stops: np.ndarray) -> np.ndarray:
    """sum_{a <= j < b} log(1 - n / (N - j)) for each piece [a, b) of ``starts``, ``stops`` (b > a).

    Pieces of at most ``DIRECT_TERMS`` terms (most of them when the frequencies are dense, as the pair sums
    of a large spectrum are) are summed term by term all at once, ``DENSE_TERMS`` terms at a time; longer
    ones by ``_sum_log_miss_terms``. The cost is then bounded by the range of frequencies, not by a Python
    call per frequency."""
    lengths = stops - starts
    out = np.empty(lengths.size)
    short = np.flatnonzero(lengths <= DIRECT_TERMS)
    if short.size:
        ends = np.cumsum(lengths[short])
        first = 0
        while first < short.size:
            done = ends[first - 1] if first else 0
            last = max(int(np.searchsorted(ends, done + DENSE_TERMS, side="right")), first + 1)
            group = short[first:last]
            counts = lengths[group]
            offsets = np.concatenate([[0], np.cumsum(counts)[:-1]])
            j = np.repeat(starts[group] - offsets, counts) + np.arange(int(counts.sum()))
            out[group] = np.add.reduceat(np.log1p(-n / (N - j.astype(float))), offsets)
            first = last
    for i in np.flatnonzero(lengths > DIRECT_TERMS):
        out[i] = _sum_log_miss_terms(N, n, int(starts[i]), int(stops[i]))
    return out


def _sum_log_miss_terms(N: int, n: int, a: int, b: int) -> float:
    """sum_{a <= j < b} log(1 - n / (N - j)), for 0 <= a <= b <= N - n.

    The terms have a pole at j = N - n. The range is cut into pieces [a, c) whose distance to the pole
    at their end is at least their length (c <= (N - n + a) / 2); each is summed by the Euler-Maclaurin
    formula (``_euler_maclaurin_log_miss``), and the last few hundred terms before b one by one.
    """
    total = 0.0
    while b - a > DIRECT_TERMS:
        c = min(b, (N - n + a) // 2)
        if c - a < DIRECT_TERMS:
            break
        total += _euler_maclaurin_log_miss(N, n, a, c)
        a = c
    j = np.arange(a, b, dtype=float)
    return total + float(np.sum(np.log1p(-n / (N - j))))


def _euler_maclaurin_log_miss(N: int, n: int, a: int, b: int) -> float:
    """sum_{a <= j < b} f(j), f(j) = log(1 - n / (N - j)), by the Euler-Maclaurin formula, for
    N - n - b >= b - a >= 256.

    sum_{j=a}^{b-1} f(j) = int_a^b f + (f(a) - f(b)) / 2 + (f1(b) - f1(a)) / 12 - (f3(b) - f3(a)) / 720
    + R, with f1, f3 the first and third derivatives (Abramowitz and Stegun 23.1.30). With u = N - x:
    int_a^b f = G(N - a) - G(N - b), G(u) = u log(1 - n/u) - n log(u - n); f1 = -n / (u (u - n));
    f3 = 2 (u^-3 - (u - n)^-3). Differences are written without cancellation (log1p); with u - n >= 256
    the remainder is far below double precision of the sum.
    """
    ua, ub = float(N - a), float(N - b)

    def f(u: float) -> float:
        return float(np.log1p(-n / u))

    def f1(u: float) -> float:
        return -n / (u * (u - n))

    def f3(u: float) -> float:
        return 2.0 * (u**-3 - (u - n) ** -3)

    integral = ua * f(ua) - ub * f(ub) - n * float(np.log1p((b - a) / (ub - n)))
    return integral + (f(ua) - f(ub)) / 2 + (f1(ub) - f1(ua)) / 12 - (f3(ub) - f3(ua)) / 720


def prob_type_unseen(spectrum: Spectrum, n: int) -> np.ndarray:
    """C(N - m, n) / C(N, n) for every frequency m of the spectrum."""
    N = _check_size(spectrum, n)
    return np.exp(_log_miss(N, int(n), spectrum.m, LOG_FLOOR))


def expected_types(spectrum: Spectrum, n: int) -> float:
    """Exact E[V(n)] for a random sample of n tokens without replacement."""
    log_miss = _log_miss(_check_size(spectrum, n), int(n), spectrum.m, LOG_FLOOR)
    return float(np.dot(spectrum.vm, -np.expm1(log_miss)))


def expected_spectrum(spectrum: Spectrum, n: int, k_max: int = 20) -> np.ndarray:
    """Exact E[V_k(n)] for k = 1..k_max (index 0 holds k = 1).

    Where C(N-m, n) > 0 the hypergeometric pmf is written as
    C(m, k) * prod_{i<k} (n - i) / (N - m - n + 1 + i) * C(N-m, n) / C(N, n), all factors computed without
    cancellation; elsewhere (m > N - n, samples close to the whole corpus) by log-gamma differences.
    """
    N = _check_size(spectrum, n)
    n = int(n)
    k = np.arange(1, k_max + 1)[:, None]
    m = spectrum.m[None, :]
    i = np.arange(k_max, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_m_falling = np.cumsum(np.log(np.maximum(m.astype(float) - i[:, None], 0)), axis=0)
        log_ratio = np.cumsum(
            np.log(np.maximum(n - i[:, None], 0)) - np.log(N - m - n + 1 + i[:, None]), axis=0
        )
        product_form = log_m_falling - gammaln(k + 1) + log_ratio + _log_miss(N, n, spectrum.m)[None, :]
    gamma_form = _log_choose(m, k) + _log_choose(N - m, n - k) - _log_choose(N, n)
    log_p = np.where((m <= N - n) & (m >= k), product_form, gamma_form)
    return np.exp(log_p) @ spectrum.vm.astype(float)


def expected_types_binomial(spectrum: Spectrum, n: float) -> float:
    """Binomial E[V(n)] = sum_m V_m (1 - (1-p)^m), p = n / N."""
    p = n / _check_size(spectrum, n)
    return (
        float(np.dot(spectrum.vm, -np.expm1(spectrum.m * np.log1p(-p)))) if p < 1 else float(spectrum.types)
    )


def expected_spectrum_binomial(spectrum: Spectrum, n: float, k_max: int = 20) -> np.ndarray:
    """Binomial E[V_k(n)] = sum_{m>=k} V_m C(m, k) p^k (1-p)^(m-k), k = 1..k_max."""
    p = n / _check_size(spectrum, n)
    k = np.arange(1, k_max + 1, dtype=float)[:, None]
    m = spectrum.m[None, :].astype(float)
    if p >= 1:
        return (m == k).astype(float) @ spectrum.vm.astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_p = _log_choose(m, k) + k * np.log(p) + (m - k) * np.log1p(-p)
    return np.exp(np.where(m >= k, log_p, -np.inf)) @ spectrum.vm.astype(float)


def variance_types(spectrum: Spectrum, n: int) -> float:
    """Exact Var[V(n)] under sampling without replacement.

    With q_m = C(N-m, n)/C(N, n) (type of frequency m missed) and, for two distinct types, the chance that
    both are missed q_{m+m'} = C(N-m-m', n)/C(N, n):
        Var V(n) = sum_i q_i (1 - q_i) + sum_{i != j} (q_{f_i+f_j} - q_i q_j)
                 = U - U^2 + sum_s c_s q_s - sum_m V_m q_{2m},    U = sum_m V_m q_m,
    where c_s counts ordered pairs of types (including i = j) whose frequencies sum to s
    (``Spectrum.pair_frequency_counts``).
    """
    N = _check_size(spectrum, n)
    n = int(n)
    if n in (0, N) or spectrum.types == 0:
        return 0.0
    _, u, pair_sum, same_type = _miss_sums(spectrum, N, n)
    return max(u - u * u + pair_sum - same_type, 0.0)


def _miss_sums(spectrum: Spectrum, N: int, n: int) -> tuple[float, float, float, float]:
    """E[V(n)], U = sum_m V_m q_m, sum_s c_s q_s and sum_m V_m q_2m from one ``_log_miss`` call over all the
    frequencies involved (one cumulative sum instead of four).

    q_x is exactly 0 in double precision for x > N - n and for x >= J = ceil(LOG_FLOOR / log(1 - n / N)),
    where the log sum has passed ``LOG_FLOOR``; pair sums from min(N - n + 1, J) on are neither convolved nor
    summed.
    """
    m = spectrum.m
    vm = spectrum.vm.astype(float)
    limit = N - n + 1
    if 0 < n < N:
        limit = min(limit, int(np.ceil(LOG_FLOOR / np.log1p(-n / N))))
    s, c = spectrum.pair_frequency_counts(limit)
    log_q = _log_miss(N, n, np.concatenate([m, s, 2 * m]), LOG_FLOOR)
    q_m, q_s, q_2m = np.split(np.exp(log_q), [m.size, m.size + s.size])
    types = float(np.dot(vm, -np.expm1(log_q[: m.size])))
    return types, float(np.dot(vm, q_m)), float(np.dot(c, q_s)), float(np.dot(vm, q_2m))


def variance_types_binomial(spectrum: Spectrum, n: float) -> float:
    """Independent-types approximation Var V(n) = sum_m V_m (1-p)^m (1 - (1-p)^m)."""
    p = n / _check_size(spectrum, n)
    miss = (1 - p) ** spectrum.m.astype(float)
    return float(np.dot(spectrum.vm, miss * (1 - miss)))


@dataclass(frozen=True)
class TypesBand:
    """E[V(n)] with its exact standard deviation over random samples of n tokens."""

    tokens: int
    types: float
    sd: float

    def limits(self, z: float) -> tuple[float, float]:
        """The normal-approximation range E[V(n)] -+ z sd (its lower end at least 0); the product's level
        is ``app.core.models.base.Z90``."""
        return max(0.0, self.types - z * self.sd), self.types + z * self.sd


def types_band(spectrum: Spectrum, n: int) -> TypesBand:
    """E[V(n)] and its exact standard deviation for a random sample of n tokens."""
    return TypesBand(int(n), expected_types(spectrum, n), float(np.sqrt(variance_types(spectrum, n))))


def growth_band(spectrum: Spectrum, sizes: np.ndarray) -> list[TypesBand]:
    """Random-order expected type growth with its exact standard deviation at each size."""
    N = spectrum.tokens
    bands = []
    for n in (int(x) for x in sizes):
        _check_size(spectrum, n)
        if n in (0, N) or spectrum.types == 0:
            bands.append(TypesBand(n, expected_types(spectrum, n), 0.0))
            continue
        types, u, pair_sum, same_type = _miss_sums(spectrum, N, n)
        bands.append(TypesBand(n, types, float(np.sqrt(max(u - u * u + pair_sum - same_type, 0.0)))))
    return bands
