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


def _neighbour_occurrences(type_ids: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """For each position, the previous and next position holding the same type (-1 and N when none)."""
    n = type_ids.size
    order = np.argsort(type_ids, kind="stable")
    same_as_next = type_ids[order[1:]] == type_ids[order[:-1]]
    prev = np.full(n, -1, dtype=np.int64)
    nxt = np.full(n, n, dtype=np.int64)
    prev[order[1:][same_as_next]] = order[:-1][same_as_next]
    nxt[order[:-1][same_as_next]] = order[1:][same_as_next]
    return prev, nxt


def mattr(type_ids: np.ndarray, window: int = MATTR_WINDOW) -> float | None:
    """Moving-average TTR (Covington & McFall 2010): the mean TTR of every window of ``window`` consecutive
    tokens; undefined when the text is shorter than the window.

    Vectorised: the first window's type count is the number of its tokens whose previous occurrence lies
    before it. Sliding by one removes the leaving token, which takes its type out when its next occurrence
    lies beyond the window - 1 tokens that stay, then adds the entering token, which brings a new type when
    its previous occurrence lies before them; a cumulative sum of these +-1 steps gives every window.
    """
    ids = np.asarray(type_ids)
    n = ids.size
    if window < 1:
        raise ValueError("the MATTR window must hold at least one token")
    if n < window:
        return None
    prev, nxt = _neighbour_occurrences(ids)
    first = int(np.count_nonzero(prev[:window] < 0))
    start = np.arange(n - window)  # window [s, s + window) slides to [s + 1, s + window + 1)
    step = (prev[start + window] <= start).astype(np.int64) - (nxt[start] >= start + window)
    counts = first + np.concatenate(([0], np.cumsum(step)))
    return float(counts.sum()) / (window * counts.size)


def _mtld_factors(ids: list[int], n_types: int, threshold: float) -> float:
    """Number of factors of one MTLD pass: a factor ends when the running TTR of the current segment falls to
    the threshold or below; the unfinished last segment counts (1 - TTR) / (1 - threshold)."""
    segment_of = [-1] * n_types  # segment in which each type was last seen
    segment = factors = length = types = 0
    for t in ids:
        length += 1
        if segment_of[t] != segment:
            segment_of[t] = segment
            types += 1
        if types / length <= threshold:
            factors += 1
            segment += 1
            length = types = 0
    if length:
        return factors + (1 - types / length) / (1 - threshold)
    return float(factors)


def mtld(type_ids: np.ndarray, threshold: float = MTLD_THRESHOLD) -> float | None:
    """Measure of textual lexical diversity (McCarthy & Jarvis 2010): N / (number of factors), averaged over a
    forward and a backward pass; a factor is a stretch of text whose running TTR has fallen to ``threshold``,
    and the leftover stretch counts as the partial factor (1 - TTR) / (1 - threshold).

    A pass with no factor at all (every token a new type) counts the whole text as one factor. Undefined for
    an empty text.
    """
    ids = np.asarray(type_ids)
    if ids.size == 0:
        return None
    if not 0 < threshold < 1:
        raise ValueError("the MTLD threshold must lie strictly between 0 and 1")
    _, dense = np.unique(ids, return_inverse=True)
    n_types = int(dense.max()) + 1
    measures = [
        ids.size / (_mtld_factors(seq, n_types, threshold) or 1.0)
        for seq in (dense.tolist(), dense[::-1].tolist())
    ]
    return (measures[0] + measures[1]) / 2


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
