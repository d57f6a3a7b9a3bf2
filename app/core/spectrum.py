"""The frequency spectrum of a corpus: V_m, the number of types that occur exactly m times.

Invariants (Baayen 2001, ch. 2): sum_m V_m = V (types) and sum_m m V_m = N (tokens).
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, eq=False)
class Spectrum:
    """Frequency spectrum with strictly ascending frequencies ``m`` and positive counts ``vm``."""

    m: np.ndarray
    vm: np.ndarray

    def __post_init__(self) -> None:
        m = np.asarray(self.m, dtype=np.int64)
        vm = np.asarray(self.vm, dtype=np.int64)
        if m.ndim != 1 or m.shape != vm.shape:
            raise ValueError("spectrum needs two 1-d arrays of the same length")
        if m.size and (m[0] < 1 or np.any(np.diff(m) <= 0)):
            raise ValueError("spectrum frequencies m must be positive and strictly ascending")
        if np.any(vm < 1):
            raise ValueError("spectrum counts V_m must be positive")
        object.__setattr__(self, "m", m)
        object.__setattr__(self, "vm", vm)

    @classmethod
    def from_frequencies(cls, frequencies: Iterable[int] | np.ndarray) -> Spectrum:
        """Build the spectrum from the frequency f_i of every type."""
        f = np.asarray(list(frequencies) if not isinstance(frequencies, np.ndarray) else frequencies)
        f = f.astype(np.int64, copy=False)
        if f.size and f.min() < 1:
            raise ValueError("type frequencies must be positive")
        m, vm = np.unique(f, return_counts=True)
        return cls(m, vm)

    @classmethod
    def from_pairs(cls, pairs: Iterable[tuple[int, int]]) -> Spectrum:
        """Build the spectrum from (m, V_m) pairs in any order; zero counts are dropped."""
        rows = sorted((int(m), int(v)) for m, v in pairs if int(v) != 0)
        return cls(
            np.array([r[0] for r in rows], dtype=np.int64), np.array([r[1] for r in rows], dtype=np.int64)
        )

    def pair_frequency_counts(self, below: int) -> tuple[np.ndarray, np.ndarray]:
        """Self-convolution of the spectrum up to ``below``: (s, c_s) for the s < ``below`` with c_s > 0,
        where c_s = sum_{m + m' = s} V_m V_m' over ordered pairs of types (a type with itself included).

        Exact: c_s for s < L involves only frequencies below L, so the dense spectrum is cut at L before its
        FFT and the result rounded back to integers. The variance of V(n) needs c_s only up to where the
        chance of missing a pair underflows (a few thousand at n >= N/100, whatever the corpus size), so
        the cost is that of a short FFT, not one over the largest frequency of the corpus. The longest
        convolution made so far is kept on the spectrum and cut for later, shorter requests.
        """
        top = min(int(below), 2 * int(self.m[-1]) + 1 if self.m.size else 1)
        kept = self.__dict__.get("_pair_counts")
        if kept is None or kept[0] < top:
            inside = self.m < top
            dense = np.zeros(max(top, 1))
            dense[self.m[inside]] = self.vm[inside]
            size = 1 << int(2 * dense.size - 1).bit_length()
            conv = np.rint(np.fft.irfft(np.fft.rfft(dense, size) ** 2, size)[: dense.size])
            s = np.flatnonzero(conv > 0)
            kept = (top, s, conv[s])
            self.__dict__["_pair_counts"] = kept  # a cache of derived numbers: the spectrum stays as it was
        _, s, c = kept
        end = int(np.searchsorted(s, below))
        return s[:end], c[:end]

    @property
    def tokens(self) -> int:
        """N = sum_m m V_m."""
        return int(np.dot(self.m, self.vm))

    @property
    def types(self) -> int:
        """V = sum_m V_m."""
        return int(self.vm.sum())

    def count(self, m: int) -> int:
        """V_m for one frequency m (0 when no type occurs m times)."""
        i = np.searchsorted(self.m, m)
        return int(self.vm[i]) if i < self.m.size and self.m[i] == m else 0

    @property
    def hapaxes(self) -> int:
        """V_1, the hapax legomena."""
        return self.count(1)

    def dense(self, m_max: int) -> np.ndarray:
        """V_1..V_{m_max} as a dense array (index 0 holds V_1)."""
        out = np.zeros(m_max, dtype=np.int64)
        keep = self.m <= m_max
        out[self.m[keep] - 1] = self.vm[keep]
        return out

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Spectrum):
            return NotImplemented
        return np.array_equal(self.m, other.m) and np.array_equal(self.vm, other.vm)

    __hash__ = None  # mutable-looking arrays inside: not hashable

    def pairs(self) -> list[list[int]]:
        """[[m, V_m], ...] with m ascending, the form used by the JSON API."""
        return [[int(a), int(b)] for a, b in zip(self.m, self.vm, strict=True)]
