"""Predictions on both sides of the corpus size N, the same for prediction and for planning.

At or below N the corpus itself is the best model of its own random samples: E[V(n)] and E[V_k(n)] are
the exact hypergeometric expectations of ``app.core.interpolation`` (between two whole sizes, linear in n,
so that the curve is continuous and planning can invert it). Its slope at N is the observed new-type rate:
E[V(N)] - E[V(N - 1)] = V_1 / N, since a sample of N - 1 of the N tokens misses a type exactly when it is
a hapax and the one token left out is its token (probability 1 / N).

Above N a model with expected types E(n) and legomena E_k(n) takes over, continued from the corpus so that
V, every V_k and the new-type rate dV/dn are continuous at N:

    V(n)   = V + C (E(n) - E(N)),          C = V_1 / (N E'(N)),
    V_1(n) = n dV(n)/dn = C n E'(n),
    V_k(n) = R(n) s_k(n),   R(n) = V(n) - V_1(n)  (the types seen at least twice),   k >= 2,
    s_k(n) = t_k(n) / max(1, max_j (t_2(n) + ... + t_j(n))),   t_k(n) = r_k(n) q_k(n),
    r_k(n) = 1 + (q^_k / q_k(N) - 1) N / n,

with q_k(n) = E_k(n) / (E(n) - E_1(n)) the model's shares of V_k among its types seen at least twice and
q^_k = V_k / (V - V_1) the corpus's (j and k up to max(k_max, ``RATIO_FREQUENCIES``)).

Why V and V_1. Under Poisson sampling from any population of word probabilities pi_i,
E(n) = sum_i (1 - exp(-n pi_i)) and n E'(n) = sum_i n pi_i exp(-n pi_i) = E_1(n): new types arrive at the
rate of the hapax legomena, dE[V(n)]/dn = E[V_1(n)] / n (the same differentiation gives Heaps' legomena in
``app.core.models.heaps``; V_1 / N as the chance that the next token is new is Good 1953, and the slope of
the growth curve as the growth rate E[V_1(N)] / N is Baayen 2001, "Word Frequency Distributions", ch. 2).
Every model of ``app.core.models`` obeys it, so for them C = V_1 / E_1(N): the model's growth beyond N is
scaled by the ratio of observed to expected hapaxes, and V_1(n) = C E_1(n) is the model's own hapax curve
under the same ratio. The identity is kept by construction for any predictor (the recommended ensemble
weights types and legomena differently and does not obey it exactly): the hapaxes beyond N are n times the
slope of the continued curve, so the new-type rate V_1(n) / n that planning uses is dV/dn itself (the
ensemble's hapaxes beyond N therefore follow its types weights; its V_2, V_3, ... its legomena weights). The
former anchoring, V E(n) / E(N), matched V at N but scaled the slope by V / E(N) instead of V_1 / E_1(N),
so that the new-type rate jumped at N by the ratio of the two, and planning answered a target inside that
jump with a size below N. E'(n) is a five-point central difference in log n (``growth_slope``), so no
predictor needs to know its own derivative; once a finite population is exhausted, rounding can make it
negative by a few units of the last place, and it is then 0.

Why V_2, V_3, ...: per-k ratios of the observed to the model's shares at N keep the model's own spectrum
shape (a model whose population runs out sends its V_k to 0, and so do they) and fade towards the model's
own shares with the corpus's weight N / n, the part of a sample of n tokens that the corpus is (a choice of
ours: half at 2 N, a tenth at 10 N). Tilted shares could add up to more than 1; they are then scaled down
together. A class the model leaves empty at N (E_k(N) = 0, only in floating-point underflow) keeps the
model's share.

Guarantees (E concave and non-decreasing beyond N, as for any Poisson mixture, E'' = -sum_i pi_i^2
exp(-n pi_i) <= 0, for Heaps' law with 0 < beta < 1 and for non-negative combinations of them; the model's
own E_k non-negative):

- continuity at N: V(N) = V; V_1(N) = C N E'(N) = V_1; t_k(N) = q^_k, whose partial sums are at most 1, so
  V_k(N) = (V - V_1) q^_k = V_k; the slope C E'(N) = V_1 / N is the interpolation's slope just below N;
- the new-type rate dV/dn = V_1(n) / n = C E'(n) is positive (V_1 > 0) and non-increasing (E'' <= 0) as
  long as the model still has unseen types, so V(n) rises above V beyond N and planning has one root,
  above N for a target above V;
- coherence: V(n) >= V; V_1(n) >= 0; R(n) = V - V_1 >= 0 at N and dR/dn = -C n E''(n) >= 0, so
  V_1(n) <= V(n); the s_k are non-negative with partial sums at most 1 by their scaling, so V_k(n) >= 0
  and V_1 + ... + V_k <= V_1 + R = V(n), for every k up to the largest computed.

A corpus without hapaxes grows at rate 0 at N, and so does its continuation: C = 0 and V(n) = V. A model
whose growth curve is flat at N (E'(N) = 0) cannot carry the observed rate and raises ValueError.

The range is the exact random-sample standard deviation (+-Z90 sd) at or below N and the model's
``ErrorBand`` above, its ends kept within the types n tokens can hold (``range_within_possible``: beyond
N never below the types already observed). ``incoherence`` (one of the rules of ``app.core.validity``,
imported here) says where a prediction breaks V_1 + ... + V_k <= V, so that it is refused instead of shown.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import Any

import numpy as np

from app.core.interpolation import expected_spectrum, expected_types, variance_types
from app.core.models.base import Z90, ArrayLike, Predictor, as_output
from app.core.spectrum import Spectrum
from app.core.validity import incoherence, range_within_possible

__all__ = ["Anchored", "incoherence"]

RATIO_FREQUENCIES = 20
"""V_2..V_K with K = max(k_max, this) are computed together beyond N, so that asking for fewer legomena
gives the same values."""
SLOPE_STEP = 1e-3
"""Step in log n of the five-point difference for E'(n) (truncation error about h^4 / 30 relative, rounding
about 1.5 eps / h relative to E / (n E'), both far below the fit's own error)."""


def _between_whole_sizes(f, n: float) -> float:
    """f at a real size n, linear between the whole sizes floor(n) and ceil(n)."""
    lo = int(np.floor(n))
    if lo == n:
        return float(f(lo))
    return float(f(lo) + (n - lo) * (f(lo + 1) - f(lo)))


def growth_slope(predictor: Predictor, n: ArrayLike) -> np.ndarray:
    """E'(n) = dE[V(n)]/dn of ``predictor``: with f(u) = E(n e^u), f'(0) = n E'(n) by the five-point central
    difference (f(-2h) - 8 f(-h) + 8 f(h) - f(2h)) / (12 h) (Abramowitz and Stegun 1964, ch. 25); at least 0."""
    n = np.asarray(n, dtype=float)
    h = SLOPE_STEP
    f = [np.asarray(predictor.types(n * np.exp(j * h)), dtype=float) for j in (-2, -1, 1, 2)]
    return np.maximum((f[0] - 8 * f[1] + 8 * f[2] - f[3]) / (12 * h) / n, 0.0)


@dataclass(frozen=True)
class Anchored:
    """A predictor on both sides of the corpus size (module docstring)."""

    predictor: Predictor
    corpus: Spectrum

    @property
    def name(self) -> str:
        return self.predictor.name

    @property
    def tokens(self) -> int:
        return self.corpus.tokens

    @cached_property
    def _at_corpus_size(self) -> tuple[float, float]:
        """(E(N), C) of the module docstring."""
        N = self.corpus.tokens
        slope = float(growth_slope(self.predictor, float(N)))
        if not np.isfinite(slope) or slope <= 0:
            raise ValueError(
                f"{self.predictor.name}: the model predicts no new types at the corpus size (its growth "
                f"curve is flat there), so it cannot continue the observed rate of {self.corpus.hapaxes:,} "
                f"hapax legomena in {N:,} tokens"
            )
        return float(self.predictor.types(float(N))), self.corpus.hapaxes / (N * slope)

    def growth_factor(self) -> float:
        """C = V_1 / (N E'(N)): the factor of the model's growth beyond N (module docstring)."""
        return self._at_corpus_size[1]

    def population(self, model_population: float) -> float:
        """The anchored total of types when the model's population holds ``model_population`` = E(inf):
        V + C (S - E(N))."""
        model_at_corpus, factor = self._at_corpus_size
        return self.corpus.types + factor * (model_population - model_at_corpus)

    def types(self, n: ArrayLike) -> ArrayLike:
        """Exact E[V(n)] for n <= N, V + C (E(n) - E(N)) beyond."""
        sizes = np.atleast_1d(np.asarray(n, dtype=float))
        N = self.corpus.tokens
        out = np.empty(sizes.shape)
        inside = sizes <= N
        for i in np.flatnonzero(inside):
            out[i] = _between_whole_sizes(lambda s: expected_types(self.corpus, s), sizes[i])
        if (~inside).any():
            model_at_corpus, factor = self._at_corpus_size
            model = np.asarray(self.predictor.types(sizes[~inside]), dtype=float)
            out[~inside] = self.corpus.types + factor * (model - model_at_corpus)
        return as_output(out.reshape(np.shape(n)), n)

    def spectrum(self, n: float, k_max: int = 20) -> np.ndarray:
        """Exact E[V_k(n)] for n <= N, the continuation of the module docstring beyond; k = 1..k_max."""
        N = self.corpus.tokens
        if n <= N:
            lo = int(np.floor(n))
            at_lo = expected_spectrum(self.corpus, lo, k_max)
            if lo == n:
                return at_lo
            return at_lo + (n - lo) * (expected_spectrum(self.corpus, lo + 1, k_max) - at_lo)
        hapaxes = self.growth_factor() * n * float(growth_slope(self.predictor, n))
        frequencies = max(k_max, RATIO_FREQUENCIES)
        tilted = (1 + (self._share_ratios(frequencies) - 1) * N / n) * self._model_shares(n, frequencies)
        shares = tilted / max(1.0, float(np.max(np.cumsum(tilted))))
        return np.concatenate(([hapaxes], (float(self.types(n)) - hapaxes) * shares))[:k_max]

    def _model_shares(self, n: float, frequencies: int) -> np.ndarray:
        """q_k(n) = E_k(n) / (E(n) - E_1(n)), k = 2..frequencies (0 where the model has no such types)."""
        model = np.asarray(self.predictor.spectrum(n, frequencies), dtype=float)
        rest = float(self.predictor.types(n)) - model[0]
        return model[1:] / rest if rest > 0 else np.zeros(frequencies - 1)

    def _share_ratios(self, frequencies: int) -> np.ndarray:
        """q^_k / q_k(N), k = 2..frequencies (1 where the model leaves the class empty at N)."""
        if frequencies not in self._ratios:
            rest = self.corpus.types - self.corpus.hapaxes
            observed = self.corpus.dense(frequencies)[1:] / rest if rest else np.zeros(frequencies - 1)
            model = self._model_shares(float(self.corpus.tokens), frequencies)
            self._ratios[frequencies] = np.divide(observed, model, out=np.ones_like(model), where=model > 0)
        return self._ratios[frequencies]

    @cached_property
    def _ratios(self) -> dict[int, np.ndarray]:
        """``_share_ratios`` kept by number of frequencies."""
        return {}

    def types_sd(self, n: float) -> float | None:
        """Exact standard deviation of V(n) over random samples (n <= N), None beyond N."""
        if n > self.corpus.tokens:
            return None
        return float(np.sqrt(variance_types(self.corpus, int(round(n)))))

    def types_low(self, n: ArrayLike) -> ArrayLike:
        """Lower end of the nominal 90% range of V(n) (scalar or array n)."""
        return self._range(n)[0]

    def types_high(self, n: ArrayLike) -> ArrayLike:
        """Upper end of the nominal 90% range of V(n) (scalar or array n)."""
        return self._range(n)[1]

    def _range(self, n: ArrayLike) -> tuple[ArrayLike, ArrayLike]:
        """Both ends of the nominal 90% range of V(n), all sizes at once: for n <= N E[V(n)] -+ Z90 sd(n)
        (exact random-sample spread), beyond N the predictor's own ``band`` (none: the prediction itself);
        always inside ``range_within_possible``."""
        sizes = np.atleast_1d(np.asarray(n, dtype=float))
        value = np.asarray(self.types(sizes), dtype=float)
        low, high = value.copy(), value.copy()
        inside = sizes <= self.corpus.tokens
        for i in np.flatnonzero(inside):
            spread = Z90 * float(self.types_sd(sizes[i]))
            low[i], high[i] = value[i] - spread, value[i] + spread
        band = getattr(self.predictor, "band", None)
        if band is not None and (~inside).any():
            low[~inside], high[~inside] = band.limits(sizes[~inside] / self.corpus.tokens, value[~inside])
        low, high = range_within_possible(sizes, low, high, self.corpus.tokens, self.corpus.types)
        return as_output(low.reshape(np.shape(n)), n), as_output(high.reshape(np.shape(n)), n)

    def as_dict(self) -> dict[str, Any]:
        return self.predictor.as_dict()
