"""Predictions on both sides of the corpus size N, the same for prediction and for planning.

At or below N the corpus itself is the best model of its own random samples: E[V(n)] and E[V_k(n)] are
the exact hypergeometric expectations of ``app.core.interpolation`` (between two whole sizes, linear in n,
so that the curve is continuous and planning can invert it). Above N a model takes over, anchored at the
observed V so that the curve does not jump at N:

    V(n) = V * E_model[V(n)] / E_model[V(N)],     V_k(n) = E_model[V_k(n)] * V / E_model[V(N)]     (n > N).

Scaling types and legomena by the same factor keeps the model's shares V_k / V, so a coherent model stays
coherent. The range is the exact random-sample standard deviation (+-Z90 sd) at or below N and the
model's ``ErrorBand`` above.

Coherence: any spectrum has V_1 + ... + V_k <= V for every k. ``incoherence`` (one of the rules of
``app.core.validity``, imported here) says where a prediction breaks that, so that it is refused instead of
shown.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from app.core.interpolation import expected_spectrum, expected_types, variance_types
from app.core.models.base import Z90, ArrayLike, Predictor, as_output
from app.core.spectrum import Spectrum
from app.core.validity import incoherence

__all__ = ["Anchored", "incoherence"]


def _between_whole_sizes(f, n: float) -> float:
    """f at a real size n, linear between the whole sizes floor(n) and ceil(n)."""
    lo = int(np.floor(n))
    if lo == n:
        return float(f(lo))
    return float(f(lo) + (n - lo) * (f(lo + 1) - f(lo)))


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

    def scale(self) -> float:
        return self.corpus.types / float(self.predictor.types(float(self.corpus.tokens)))

    def types(self, n: ArrayLike) -> ArrayLike:
        """Exact E[V(n)] for n <= N, the anchored model beyond."""
        sizes = np.atleast_1d(np.asarray(n, dtype=float))
        N = self.corpus.tokens
        out = np.empty(sizes.shape)
        inside = sizes <= N
        for i in np.flatnonzero(inside):
            out[i] = _between_whole_sizes(lambda s: expected_types(self.corpus, s), sizes[i])
        if (~inside).any():
            out[~inside] = np.asarray(self.predictor.types(sizes[~inside]), dtype=float) * self.scale()
        return as_output(out.reshape(np.shape(n)), n)

    def spectrum(self, n: float, k_max: int = 20) -> np.ndarray:
        """Exact E[V_k(n)] for n <= N, the anchored model beyond; k = 1..k_max."""
        if n <= self.corpus.tokens:
            lo = int(np.floor(n))
            at_lo = expected_spectrum(self.corpus, lo, k_max)
            if lo == n:
                return at_lo
            return at_lo + (n - lo) * (expected_spectrum(self.corpus, lo + 1, k_max) - at_lo)
        return self.predictor.spectrum(n, k_max) * self.scale()

    def types_sd(self, n: float) -> float | None:
        """Exact standard deviation of V(n) over random samples (n <= N), None beyond N."""
        if n > self.corpus.tokens:
            return None
        return float(np.sqrt(variance_types(self.corpus, int(round(n)))))

    def _limits(self, n: float) -> tuple[float, float]:
        value = float(self.types(n))
        sd = self.types_sd(n)
        if sd is not None:
            return max(0.0, value - Z90 * sd), value + Z90 * sd
        band = getattr(self.predictor, "band", None)
        if band is None:
            return value, value
        low, high = band.limits(n / self.corpus.tokens, value)
        return float(low), float(high)

    def types_low(self, n: ArrayLike) -> ArrayLike:
        """Lower end of the nominal 90% range of V(n) (scalar or array n)."""
        return self._side(n, 0)

    def types_high(self, n: ArrayLike) -> ArrayLike:
        """Upper end of the nominal 90% range of V(n) (scalar or array n)."""
        return self._side(n, 1)

    def _side(self, n: ArrayLike, side: int) -> ArrayLike:
        values = np.array([self._limits(float(x))[side] for x in np.atleast_1d(n)])
        return as_output(values.reshape(np.shape(n)), n)

    def as_dict(self) -> dict[str, Any]:
        return self.predictor.as_dict()
