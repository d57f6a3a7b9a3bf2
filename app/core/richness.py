"""Lexical richness indices from a frequency spectrum (and, for MATTR and MTLD, the text order).

Logarithms are natural. Herdan's C does not depend on the base; Dugast's U and Maas' a^2 do (they scale by
ln b and 1 / ln b in base b), so values from tools using log10 differ by those factors.

Most indices drift with the text length N (Tweedie & Baayen 1998). ``richness_at_size`` puts corpora on an
equal footing by computing the size-dependent ones from the expected V(n), V_1(n), V_2(n) of a random
sample of a common size n (exact interpolation, Baayen 2001, ch. 2).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from app.core.interpolation import expected_spectrum, expected_types
from app.core.occurrences import previous_occurrences, reversed_previous
from app.core.spectrum import Spectrum

HDD_DRAWS = 42
MATTR_WINDOW = 50
MTLD_THRESHOLD = 0.72


def ttr(n: float, v: float) -> float:
    """Type-token ratio V / N (Chotlos 1944; Templin 1957)."""
    return v / n


def guiraud_r(n: float, v: float) -> float:
    """Guiraud's R = V / sqrt(N) (Guiraud 1954), also called root TTR."""
    return v / math.sqrt(n)


def herdan_c(n: float, v: float) -> float | None:
    """Herdan's C = log V / log N (Herdan 1960); undefined for N <= 1."""
    return math.log(v) / math.log(n) if n > 1 else None


def dugast_u(n: float, v: float) -> float | None:
    """Dugast's U = (log N)^2 / (log N - log V) (Dugast 1978); undefined when V = N."""
    return math.log(n) ** 2 / (math.log(n) - math.log(v)) if v < n else None


def maas_a2(n: float, v: float) -> float | None:
    """Maas' a^2 = (log N - log V) / (log N)^2 (Maas 1972); lower means richer; undefined for N <= 1."""
    return (math.log(n) - math.log(v)) / math.log(n) ** 2 if n > 1 else None


def honore_h(n: float, v: float, v1: float) -> float | None:
    """Honoré's H = 100 log N / (1 - V_1 / V) (Honoré 1979); undefined when every type is a hapax."""
    return 100 * math.log(n) / (1 - v1 / v) if v1 < v else None


def sichel_s(v: float, v2: float) -> float:
    """Sichel's S = V_2 / V, the share of dis legomena (Sichel 1975)."""
    return v2 / v


def brunet_w(n: float, v: float) -> float:
    """Brunet's W = N^(V^-0.165) (Brunet 1978)."""
    return n ** (v**-0.165)


def yule_k(spectrum: Spectrum) -> float:
    """Yule's K = 10^4 (sum_m m^2 V_m - N) / N^2 (Yule 1944)."""
    n = spectrum.tokens
    m = spectrum.m.astype(float)
    return 1e4 * (float(np.dot(m * m, spectrum.vm)) - n) / n**2


def simpson_d(spectrum: Spectrum) -> float | None:
    """Simpson's D = sum_m V_m (m / N) ((m - 1) / (N - 1)) (Simpson 1949), the chance that two tokens drawn
    without replacement are the same type; undefined for N < 2."""
    n = spectrum.tokens
    if n < 2:
        return None
    m = spectrum.m.astype(float)
    return float(np.dot(spectrum.vm, m * (m - 1))) / (n * (n - 1))


def hd_d(spectrum: Spectrum, draws: int = HDD_DRAWS) -> float | None:
    """HD-D (McCarthy & Jarvis 2007) = E[V(draws)] / draws,
    i.e. sum_i (1 - hypergeom.pmf(0; N, f_i, draws)) / draws:
    the expected TTR of a random sample of 42 tokens (exact interpolation); undefined for N < draws."""
    return expected_types(spectrum, draws) / draws if spectrum.tokens >= draws else None


_CHUNK = 1 << 20
MTLD_CHAINS = 512
"""Chains of factors followed side by side in the first stage of ``mtld_factors``."""
MTLD_WIDTH = 128
"""Tokens examined per chain and step; about one MTLD factor of English text."""


def mattr(type_ids: np.ndarray, window: int = MATTR_WINDOW, prev: np.ndarray | None = None) -> float | None:
    """Moving-average TTR (Covington & McFall 2010): the mean TTR of every window of ``window`` consecutive
    tokens; undefined when the text is shorter than the window. ``prev`` (``previous_occurrences`` of the
    text) may be passed when already computed.

    With prev[i] the previous position of the type at i, the window [s, s + W) holds the types whose first
    position in it, i, has prev[i] < s. Summing over positions instead of over the N - W + 1 windows, token i
    is such a first position for the starts max(i - W + 1, prev[i] + 1) <= s <= min(i, N - W), so

        MATTR = sum_i max(0, min(i, N - W) - max(i - W + 1, prev[i] + 1) + 1) / (W (N - W + 1)),

    an exact integer sum divided once, computed in chunks of bounded memory.
    """
    n = int(type_ids.size)
    if window < 1:
        raise ValueError("the MATTR window must hold at least one token")
    if n < window:
        return None
    if prev is None:
        prev = previous_occurrences(type_ids)
    total = 0
    for base in range(0, n, _CHUNK):
        i = np.arange(base, min(base + _CHUNK, n), dtype=np.int64)
        low = np.maximum(i - window + 1, prev[base : base + i.size].astype(np.int64) + 1)
        high = np.minimum(i, n - window)
        total += int(np.maximum(high - low + 1, 0).sum())
    return float(total) / (window * (n - window + 1))


def _scan_factor(prev: np.ndarray, start: int, pos: int, types: int, threshold: float) -> tuple[int, int]:
    """Continue the factor that began at ``start`` from position ``pos``, holding ``types`` types so far.

    Returns (end, 0) with ``end`` the position where the running TTR first falls to the threshold or below,
    or (N, types of the unfinished factor) when the text ends first. Windows double from ``MTLD_WIDTH``.
    """
    n = prev.size
    width = MTLD_WIDTH
    while pos < n:
        window = prev[pos : pos + width]
        count = types + np.cumsum(window < start)
        length = np.arange(pos - start + 1, pos - start + 1 + window.size)
        ended = np.flatnonzero(count / length <= threshold)
        if ended.size:
            return pos + int(ended[0]), 0
        types = int(count[-1])
        pos += window.size
        width = min(2 * width, _CHUNK)
    return n, types


def mtld_factors(prev: np.ndarray, threshold: float = MTLD_THRESHOLD) -> float:
    """Factors of one MTLD pass (McCarthy & Jarvis 2010) over a text given by its previous occurrences.

    A factor starting at a holds, after position t, the types of the positions i in [a, t] with prev[i] < a;
    it ends at the first t where that count divided by t - a + 1 falls to the threshold or below, and the
    next factor starts at t + 1. The unfinished last factor counts (1 - TTR) / (1 - threshold).

    The pass is sequential, but where a factor ends depends only on where it starts. Stage 1 cuts the text
    into blocks and follows a chain of factors from every block start at once (one NumPy step advances every
    chain by a factor or by ``MTLD_WIDTH`` tokens), recording each chain's factor starts inside its block.
    Stage 2 walks the true chain from position 0: from the first start it shares with the chain of a block
    the two coincide, so it takes that chain's count of factor ends in the block; at the block end it goes on
    factor by factor until it reaches a start recorded by a later chain. Chains of real text meet within a
    few factors, so stage 2 is short; any text (even one without factors) gets the exact sequential count.
    """
    n = int(prev.size)
    if n == 0:
        return 0.0
    block = max(-(-n // MTLD_CHAINS), 4 * MTLD_WIDTH)
    block_start = np.arange(0, n, block, dtype=np.int64)
    block_end = np.minimum(block_start + block, n)
    chains = block_start.size
    ends_in_block = np.zeros(chains, dtype=np.int64)
    last_start = block_start.copy()
    last_types = np.zeros(chains, dtype=np.int64)
    recorded = [block_start]
    # stage 1: every chain inside its own block, side by side
    active = np.arange(chains)
    start, pos, types = block_start.copy(), block_start.copy(), np.zeros(chains, dtype=np.int64)
    offsets = np.arange(MTLD_WIDTH)
    while active.size:
        stop = block_end[active]
        index = pos[:, None] + offsets
        inside = index < stop[:, None]
        window = prev[np.minimum(index, n - 1)]
        count = types[:, None] + np.cumsum(window < start[:, None], axis=1)
        length = (pos - start + 1)[:, None] + offsets
        hit = (count / length <= threshold) & inside
        ended = hit.any(axis=1)
        end = pos + hit.argmax(axis=1)
        ends_in_block[active[ended]] += 1
        following = end[ended] + 1
        recorded.append(following[following < stop[ended]])
        unfinished = ~ended
        seen = np.minimum(stop[unfinished] - pos[unfinished], MTLD_WIDTH)
        types[unfinished] = count[unfinished, seen - 1]
        pos[unfinished] += seen
        start[ended] = following
        pos[ended] = following
        types[ended] = 0
        done = pos >= stop
        last_start[active[done]] = start[done]
        last_types[active[done]] = types[done]
        keep = ~done
        active, start, pos, types = active[keep], start[keep], pos[keep], types[keep]
    starts = np.sort(np.concatenate(recorded))
    first_index = np.searchsorted(starts, block_start)
    # stage 2: the true chain
    factors, chain, index = 0, 0, 0
    while True:
        factors += int(ends_in_block[chain]) - (index - int(first_index[chain]))
        a, t, p = int(last_start[chain]), int(last_types[chain]), int(block_end[chain])
        while True:
            if a >= n:
                return float(factors)
            if a == p:  # a fresh factor: if a later chain recorded this start, follow that chain
                k = int(np.searchsorted(starts, a))
                if k < starts.size and starts[k] == a:
                    chain = int(np.searchsorted(block_start, a, side="right")) - 1
                    index = k
                    break
            end, t = _scan_factor(prev, a, p, t, threshold)
            if end >= n:
                return factors + (1 - t / (n - a)) / (1 - threshold)
            factors += 1
            a = p = end + 1
            t = 0


def mtld(
    type_ids: np.ndarray, threshold: float = MTLD_THRESHOLD, prev: np.ndarray | None = None
) -> float | None:
    """Measure of textual lexical diversity (McCarthy & Jarvis 2010): N / (number of factors), averaged over a
    forward and a backward pass; a factor is a stretch of text whose running TTR has fallen to ``threshold``,
    and the leftover stretch counts as the partial factor (1 - TTR) / (1 - threshold).

    A pass with no factor at all (every token a new type) counts the whole text as one factor. Undefined for
    an empty text. Both passes run on previous occurrences (``mtld_factors``; ``prev`` may be passed when
    already computed), with no per-token Python objects.
    """
    n = int(type_ids.size)
    if n == 0:
        return None
    if not 0 < threshold < 1:
        raise ValueError("the MTLD threshold must lie strictly between 0 and 1")
    if prev is None:
        prev = previous_occurrences(type_ids)
    forward = mtld_factors(prev, threshold)
    backward = mtld_factors(reversed_previous(prev), threshold)
    return (n / (forward or 1.0) + n / (backward or 1.0)) / 2


@dataclass(frozen=True)
class SizeDependentIndices:
    """Indices that drift with the text length, at ``tokens`` tokens (observed or expected counts)."""

    tokens: float
    types: float
    hapaxes: float
    dis_legomena: float
    ttr: float
    guiraud_r: float
    herdan_c: float | None
    dugast_u: float | None
    maas_a2: float | None
    honore_h: float | None
    sichel_s: float
    brunet_w: float

    def as_dict(self) -> dict[str, float | None]:
        return asdict(self)


def _size_dependent(n: float, v: float, v1: float, v2: float) -> SizeDependentIndices:
    if not (n > 0 and v > 0):
        raise ValueError("richness indices need at least one token")
    return SizeDependentIndices(
        n,
        v,
        v1,
        v2,
        ttr(n, v),
        guiraud_r(n, v),
        herdan_c(n, v),
        dugast_u(n, v),
        maas_a2(n, v),
        honore_h(n, v, v1),
        sichel_s(v, v2),
        brunet_w(n, v),
    )


@dataclass(frozen=True)
class RichnessIndices(SizeDependentIndices):
    """All indices of one corpus at its own size. Yule's K, Simpson's D, HD-D and MTLD are (nearly) free of
    the text length; MATTR and MTLD need the text order and are None without it."""

    yule_k: float
    simpson_d: float | None
    hd_d: float | None
    mattr: float | None
    mtld: float | None


def richness_indices(spectrum: Spectrum, type_ids: np.ndarray | None = None) -> RichnessIndices:
    """Every index of the corpus; ``type_ids`` is the text as a 1-d integer array of type ids in text
    order (without it MATTR and MTLD are None)."""
    base = _size_dependent(spectrum.tokens, spectrum.types, spectrum.hapaxes, spectrum.count(2))
    order_based = (None, None) if type_ids is None else (mattr(type_ids), mtld(type_ids))
    return RichnessIndices(
        **base.as_dict(),
        yule_k=yule_k(spectrum),
        simpson_d=simpson_d(spectrum),
        hd_d=hd_d(spectrum),
        mattr=order_based[0],
        mtld=order_based[1],
    )


def richness_at_size(spectrum: Spectrum, n: int) -> SizeDependentIndices:
    """The size-dependent indices at a common size n <= N: TTR, Guiraud's R, Herdan's C, Dugast's U,
    Maas' a^2, Honoré's H, Sichel's S and Brunet's W, each computed from the exact expected E[V(n)],
    E[V_1(n)] and E[V_2(n)] of a random sample of n tokens (plug-in values, not expectations of the indices).

    Yule's K, Simpson's D, HD-D and MTLD need no size matching and are not repeated here.
    """
    v1, v2 = expected_spectrum(spectrum, n, 2)
    return _size_dependent(float(n), expected_types(spectrum, n), float(v1), float(v2))
