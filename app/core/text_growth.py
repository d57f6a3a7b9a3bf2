"""Vocabulary growth by texts: rarefaction, extrapolation and planning with texts as the sampling unit.

A corpus of T texts is incidence data (Chao et al. 2014, "Rarefaction and extrapolation with Hill numbers",
Ecological Monographs 84: 45-67, section on sampling-unit-based incidence data): what counts for a type w is
its document frequency d_w, the number of texts it occurs in, and the incidence frequency counts
Q_j = #{types in exactly j texts}, j = 1..T. S_obs = sum_j Q_j is the corpus's number of types.

- Rarefaction (k <= T texts drawn at random without replacement from the T texts): a type is missed when all
  k texts come from the T - d_w texts without it, so exactly
      E[V(k)] = sum_w [1 - C(T - d_w, k) / C(T, k)] = sum_j Q_j [1 - alpha_jk],  alpha_jk = C(T-j, k)/C(T, k)
  (Chao et al. 2014, eq. for the incidence-based rarefied richness; the hypergeometric argument of Hurlbert
  1971 applied to texts).
- Its variance: the exact variance over draws of these T texts needs every pair's joint document frequency
  (P(w and w' both missed) = C(T - d_{w or w'}, k) / C(T, k)), quadratic in the types. We give instead the
  standard *unconditional* approximation of incidence-based rarefaction (Colwell et al. 2012, J. Plant
  Ecology 5: 3-21, eq. for sample-based rarefaction; Chao et al. 2014):
      var V(k) ~= sum_j (1 - alpha_jk)^2 Q_j - E[V(k)]^2 / S_hat,
  S_hat the Chao2 estimate below. It is the variance about the population of texts of this kind, not only
  over subsets of these T texts, and is not zero at k = T.
- Extrapolation to T + t texts (Chao et al. 2014, incidence-based extrapolation, with Chao2 as asymptote):
      E[V(T + t)] = S_obs + Q0_hat [1 - (1 - Q_1 / (T Q0_hat + Q_1))^t],
      Q0_hat = (T-1)/T * Q_1^2 / (2 Q_2)  (Q_2 > 0),   (T-1)/T * Q_1 (Q_1 - 1) / 2  (Q_2 = 0)
  (Chao 1987; bias-corrected form when Q_2 = 0), so that V grows from S_obs at t = 0 towards
  Chao2 = S_obs + Q0_hat. Chao et al. 2014 advise not to extrapolate beyond about twice the sample (2 T).
- Its range: Chao et al. 2014 give the standard error of an extrapolation by a bootstrap and the interval
  estimate +- z s.e. We resample the T texts with replacement (Efron's bootstrap over texts, not their
  bootstrap from an estimated assemblage: simpler, and conservative about the rare types) and take the
  standard deviation of each replicate's extrapolation as the s.e.; the range is +- Z90 s.e. (nominal 90%).
- Planning: the number of further texts t at which E[V(T + t)] reaches V*, with the range given by where
  the upper and lower ends of the extrapolation's range reach it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.special import gammaln

Z90 = 1.6448536269514722  # the standard normal's 95% quantile: a two-sided nominal 90% range
BOOTSTRAP_REPLICATES = 100
PLAN_LARGEST_FACTOR = 1000
"""Planning looks for an answer up to this many times the corpus's texts."""


class UnreachableTextTargetError(ValueError):
    """The target cannot be reached by adding texts of this kind; the message says why."""


@dataclass(frozen=True)
class Incidence:
    """Incidence data of a corpus of ``texts`` texts: ``frequencies`` maps j to Q_j (types in exactly j
    texts), only the j with Q_j > 0, ascending."""

    texts: int
    frequencies: tuple[tuple[int, int], ...]

    @classmethod
    def from_document_frequencies(cls, texts: int, document_frequencies: np.ndarray) -> Incidence:
        d = np.asarray(document_frequencies, dtype=np.int64)
        d = d[d > 0]
        if texts < 1:
            raise ValueError("incidence data need at least one text")
        if d.size and d.max() > texts:
            raise ValueError("a type cannot occur in more texts than the corpus has")
        j, q = np.unique(d, return_counts=True)
        return cls(texts, tuple((int(a), int(b)) for a, b in zip(j, q, strict=True)))

    def q(self, j: int) -> int:
        return dict(self.frequencies).get(j, 0)

    @property
    def observed_types(self) -> int:
        return sum(q for _, q in self.frequencies)

    @property
    def undetected(self) -> float:
        """Q0_hat of Chao2: the estimated number of types in no text of the corpus (Chao 1987)."""
        t, q1, q2 = self.texts, self.q(1), self.q(2)
        if t == 1 or q1 == 0:
            return 0.0
        factor = (t - 1) / t
        return factor * q1 * q1 / (2 * q2) if q2 > 0 else factor * q1 * (q1 - 1) / 2

    @property
    def chao2(self) -> float:
        """The asymptote S_obs + Q0_hat."""
        return self.observed_types + self.undetected


def _missed_probability(texts: int, j: np.ndarray, k: np.ndarray) -> np.ndarray:
    """alpha_jk = C(T - j, k) / C(T, k) for every j (rows) and k (columns); 0 where T - j < k."""
    j = np.asarray(j, dtype=np.float64)[:, None]
    k = np.asarray(k, dtype=np.float64)[None, :]
    rest = texts - j - k
    log = (
        gammaln(texts - j + 1)
        - gammaln(np.maximum(rest, 0) + 1)
        - gammaln(texts + 1)
        + gammaln(texts - k + 1)
    )
    return np.where(rest >= 0, np.exp(np.minimum(log, 0.0)), 0.0)


def expected_types(incidence: Incidence, k: np.ndarray | int) -> np.ndarray:
    """Exact E[V(k)] = sum_j Q_j (1 - C(T-j, k)/C(T, k)) for 0 <= k <= T texts drawn without replacement."""
    k = np.atleast_1d(np.asarray(k, dtype=np.int64))
    if k.size and (k.min() < 0 or k.max() > incidence.texts):
        raise ValueError(f"k must lie in 0..{incidence.texts} texts")
    if not incidence.frequencies:
        return np.zeros(k.size)
    j, q = np.array(incidence.frequencies, dtype=np.int64).T
    return (q[:, None] * (1.0 - _missed_probability(incidence.texts, j, k))).sum(axis=0)


def rarefaction_variance(incidence: Incidence, k: np.ndarray | int) -> np.ndarray:
    """The unconditional approximation sum_j (1 - alpha_jk)^2 Q_j - E[V(k)]^2 / Chao2 (Colwell et al. 2012,
    Chao et al. 2014), at least 0."""
    k = np.atleast_1d(np.asarray(k, dtype=np.int64))
    if not incidence.frequencies:
        return np.zeros(k.size)
    j, q = np.array(incidence.frequencies, dtype=np.int64).T
    seen = 1.0 - _missed_probability(incidence.texts, j, k)
    expected = (q[:, None] * seen).sum(axis=0)
    return np.maximum((q[:, None] * seen**2).sum(axis=0) - expected**2 / incidence.chao2, 0.0)


def _extrapolate(
    observed: np.ndarray, q1: np.ndarray, q0: np.ndarray, texts: int, more: np.ndarray
) -> np.ndarray:
    """S_obs + Q0 [1 - (1 - Q1 / (T Q0 + Q1))^t] for arrays of (S_obs, Q1, Q0) (rows) and t (columns)."""
    observed, q1, q0 = (np.asarray(a, dtype=np.float64)[:, None] for a in (observed, q1, q0))
    more = np.asarray(more, dtype=np.float64)[None, :]
    denominator = texts * q0 + q1
    ratio = np.divide(q1, denominator, out=np.zeros_like(denominator), where=denominator > 0)
    return observed + q0 * (1.0 - (1.0 - ratio) ** more)


def extrapolated_types(incidence: Incidence, more: np.ndarray | int) -> np.ndarray:
    """E[V(T + t)] for t >= 0 further texts (Chao et al. 2014, incidence-based extrapolation)."""
    more = np.atleast_1d(np.asarray(more, dtype=np.int64))
    if more.size and more.min() < 0:
        raise ValueError("the number of further texts must be >= 0")
    return _extrapolate(
        np.array([incidence.observed_types]),
        np.array([incidence.q(1)]),
        np.array([incidence.undetected]),
        incidence.texts,
        more,
    )[0]


@dataclass(frozen=True)
class Replicates:
    """Bootstrap replicates over texts: each replicate's observed types, Q_1 and Q0_hat (the numbers the
    extrapolation needs), all of the same number of texts."""

    texts: int
    observed: np.ndarray
    q1: np.ndarray
    undetected: np.ndarray


def bootstrap_over_texts(
    texts: int,
    pair_text: np.ndarray,
    pair_type: np.ndarray,
    types: int,
    replicates: int = BOOTSTRAP_REPLICATES,
    seed: int = 0,
) -> Replicates:
    """Resample the ``texts`` texts with replacement ``replicates`` times (Efron 1979). The corpus is given as
    its (text, type) incidence pairs; in a replicate a type's document frequency is the sum over its texts
    of how often each was drawn. Cost: O(replicates x pairs)."""
    rng = np.random.default_rng(seed)
    pair_text = np.asarray(pair_text, dtype=np.int64)
    pair_type = np.asarray(pair_type, dtype=np.int64)
    observed, q1, q0 = (np.zeros(replicates) for _ in range(3))
    for r in range(replicates):
        drawn = rng.multinomial(texts, np.full(texts, 1.0 / texts))
        frequency = np.bincount(pair_type, weights=drawn[pair_text], minlength=types)
        incidence = Incidence.from_document_frequencies(texts, np.rint(frequency).astype(np.int64))
        observed[r], q1[r], q0[r] = incidence.observed_types, incidence.q(1), incidence.undetected
    return Replicates(texts, observed, q1, q0)


def extrapolation_sd(boot: Replicates, more: np.ndarray) -> np.ndarray:
    """The bootstrap standard error of E[V(T + t)] at each t (sd over replicates, ddof 1)."""
    curves = _extrapolate(boot.observed, boot.q1, boot.undetected, boot.texts, np.asarray(more))
    return curves.std(axis=0, ddof=1) if curves.shape[0] > 1 else np.zeros(curves.shape[1])


def _first_reaching(f, target: float, largest: int) -> int | None:
    """The smallest integer t in [0, largest] with f(t) >= target, found on a log grid and refined by
    bisection (f taken as increasing between two grid points); None when f(largest) < target."""
    grid = np.unique(np.rint(np.geomspace(1, largest, 400)).astype(np.int64))
    grid = np.concatenate([[0], grid])
    values = f(grid)
    above = np.flatnonzero(values >= target)
    if not above.size:
        return None
    hi = int(grid[above[0]])
    lo = int(grid[above[0] - 1]) if above[0] > 0 else -1
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if f(np.array([mid]))[0] >= target:
            hi = mid
        else:
            lo = mid
    return hi


@dataclass(frozen=True)
class TextPlan:
    """How many further texts until ``target`` types: ``more`` by the point estimate, ``more_low`` and
    ``more_high`` where the upper and lower ends of the range reach it (``more_high`` None when the lower
    end does not reach it within ``largest`` texts)."""

    target: float
    more: int
    more_low: int
    more_high: int | None
    largest: int


def plan_texts(incidence: Incidence, boot: Replicates, target: float) -> TextPlan:
    """Further texts t such that E[V(T + t)] >= V* (0 when the corpus holds V* types already); raises
    UnreachableTextTargetError when V* is at or above the Chao2 asymptote."""
    if not math.isfinite(target) or target <= 0:
        raise UnreachableTextTargetError("a target number of types must be a positive number")
    observed = incidence.observed_types
    if target <= observed:
        return TextPlan(target, 0, 0, 0, 0)
    asymptote = incidence.chao2
    if target >= asymptote:
        raise UnreachableTextTargetError(
            f"{target:g} types cannot be reached with more texts of this kind: the estimated total "
            f"vocabulary of such texts (Chao2) is {asymptote:.1f} types"
        )
    largest = PLAN_LARGEST_FACTOR * incidence.texts

    def band(sign: float):
        return lambda t: extrapolated_types(incidence, t) + sign * Z90 * extrapolation_sd(boot, t)

    more = _first_reaching(lambda t: extrapolated_types(incidence, t), target, largest)
    if more is None:
        raise UnreachableTextTargetError(
            f"{target:g} types would need more than {largest:,} further texts ({PLAN_LARGEST_FACTOR} times the "
            "corpus)"
        )
    low = _first_reaching(band(+1.0), target, largest)
    high = _first_reaching(band(-1.0), target, largest)
    return TextPlan(target, more, low if low is not None else more, high, largest)
