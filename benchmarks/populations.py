"""Simulated vocabularies whose truth is known exactly, for the accuracy benchmark (``accuracy.py``).

A population is a way of drawing a "whole" of N tokens (an array of type ids); the benchmark then fits the
models on a random part of that whole and compares their prediction at N with the whole's exact V(N) and
V_1(N). Each population also knows its expectations E[V(n)] and E[V_1(n)], to show how far the one whole
drawn lies from them. Three ways of drawing:

- ``Multinomial``: n independent tokens from fixed type probabilities p_1..p_S (Baayen 2001, ch. 2, the
  binomial model of word frequency distributions):
      E[V(n)] = sum_i (1 - (1 - p_i)^n),     E[V_1(n)] = sum_i n p_i (1 - p_i)^(n - 1).
- ``SimonProcess`` (Simon 1955): the first token is a new type; every later token is a new type with
  probability a, otherwise a copy of a token drawn uniformly from those before it (a type is copied in
  proportion to its frequency so far). Vocabulary without bound, frequencies with a power-law tail of
  exponent 1 + 1 / (1 - a). Each new token is new with probability a, so E[V(n)] = 1 + a (n - 1); a hapax
  is copied (and stops being one) with probability (1 - a) V_1(t) / t, which gives the exact recurrence
  E[V_1(t + 1)] = E[V_1(t)] (1 - (1 - a) / t) + a from E[V_1(1)] = 1.
- ``Mixture``: fixed shares of the N tokens drawn from parts with disjoint vocabularies (a closed list
  beside an open vocabulary); the expectations are the sums of the parts'.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass

import numpy as np

CLOSED = "closed"
SATURATING = "saturating"
OPEN = "open"
MIXTURE = "mixture"
SIMULATED_KINDS = (CLOSED, SATURATING, OPEN, MIXTURE)


def zipf_mandelbrot(types: int, exponent: float, shift: float = 0.0) -> np.ndarray:
    """Type probabilities p_r proportional to (r + shift)^-exponent for the ranks r = 1..types
    (exponent 0: every type equally likely)."""
    weights = (np.arange(1, types + 1, dtype=float) + shift) ** -exponent
    return weights / weights.sum()


def compact_ids(counts: np.ndarray) -> np.ndarray:
    """Token type ids 0..V-1 (each type repeated its count times) for the types of non-zero count."""
    seen = counts[counts > 0]
    return np.repeat(np.arange(seen.size), seen)


class Source(ABC):
    """A way of drawing tokens, with its exact expectations."""

    @abstractmethod
    def draw(self, tokens: int, rng: np.random.Generator) -> np.ndarray:
        """Type ids (0..V-1) of ``tokens`` tokens; their order carries no meaning."""

    @abstractmethod
    def expected_types(self, tokens: int) -> float:
        """E[V(tokens)]."""

    @abstractmethod
    def expected_hapaxes(self, tokens: int) -> float:
        """E[V_1(tokens)]."""

    @property
    @abstractmethod
    def population_types(self) -> float:
        """S, the number of types of the population (inf when it has no bound)."""


@dataclass(frozen=True, eq=False)
class Multinomial(Source):
    """Independent tokens from the type probabilities ``probabilities`` (module docstring)."""

    probabilities: np.ndarray

    def draw(self, tokens: int, rng: np.random.Generator) -> np.ndarray:
        return compact_ids(rng.multinomial(tokens, self.probabilities))

    def expected_types(self, tokens: int) -> float:
        """sum_i (1 - (1 - p_i)^n), as -expm1(n log1p(-p_i)) to keep the smallest p_i exact."""
        return float(np.sum(-np.expm1(tokens * np.log1p(-self.probabilities))))

    def expected_hapaxes(self, tokens: int) -> float:
        """sum_i n p_i (1 - p_i)^(n - 1)."""
        p = self.probabilities
        return float(np.sum(tokens * p * np.exp((tokens - 1) * np.log1p(-p))))

    @property
    def population_types(self) -> float:
        return float(np.count_nonzero(self.probabilities))


@dataclass(frozen=True)
class SimonProcess(Source):
    """Simon's (1955) process with new-type probability ``new_type_probability`` (module docstring)."""

    new_type_probability: float

    def draw(self, tokens: int, rng: np.random.Generator) -> np.ndarray:
        """Every token points at the earlier token it copies (a new type points at itself); following the
        pointers by repeated doubling (parent <- parent[parent], about log2 N rounds) reaches the token
        that brought its type in; types are numbered in order of first appearance."""
        position = np.arange(tokens)
        new = rng.random(tokens) < self.new_type_probability
        new[0] = True
        parent = np.where(new, position, np.floor(rng.random(tokens) * position).astype(np.int64))
        while True:
            further = parent[parent]
            if np.array_equal(further, parent):
                break
            parent = further
        return np.cumsum(new)[parent] - 1

    def expected_types(self, tokens: int) -> float:
        """1 + a (n - 1)."""
        return 1 + self.new_type_probability * (tokens - 1)

    def expected_hapaxes(self, tokens: int) -> float:
        """The recurrence of the module docstring, from E[V_1(1)] = 1."""
        a = self.new_type_probability
        hapaxes = 1.0
        for t in range(1, tokens):
            hapaxes = hapaxes * (1 - (1 - a) / t) + a
        return hapaxes

    @property
    def population_types(self) -> float:
        return float("inf")


@dataclass(frozen=True)
class Mixture(Source):
    """round(share x N) tokens from each part, the parts' vocabularies kept apart (shares add up to 1)."""

    parts: tuple[tuple[float, Source], ...]

    def split(self, tokens: int) -> list[int]:
        """Tokens per part: round(share N), the last part taking the rest."""
        sizes = [round(share * tokens) for share, _ in self.parts[:-1]]
        return [*sizes, tokens - sum(sizes)]

    def draw(self, tokens: int, rng: np.random.Generator) -> np.ndarray:
        pieces, offset = [], 0
        for (_, source), size in zip(self.parts, self.split(tokens), strict=True):
            ids = source.draw(size, rng)
            pieces.append(ids + offset)
            offset += int(ids.max()) + 1 if ids.size else 0
        return np.concatenate(pieces)

    def expected_types(self, tokens: int) -> float:
        sizes = self.split(tokens)
        return sum(s.expected_types(n) for (_, s), n in zip(self.parts, sizes, strict=True))

    def expected_hapaxes(self, tokens: int) -> float:
        sizes = self.split(tokens)
        return sum(s.expected_hapaxes(n) for (_, s), n in zip(self.parts, sizes, strict=True))

    @property
    def population_types(self) -> float:
        return sum(s.population_types for _, s in self.parts)


@dataclass(frozen=True)
class Population:
    """A named population of one kind (CLOSED, SATURATING, OPEN or MIXTURE) and the size N of its whole."""

    name: str
    kind: str
    tokens: int
    source: Source

    def whole(self, rng: np.random.Generator) -> np.ndarray:
        return self.source.draw(self.tokens, rng)


def _zipf(types: int, exponent: float, shift: float = 0.0) -> Multinomial:
    return Multinomial(zipf_mandelbrot(types, exponent, shift))


def populations() -> tuple[Population, ...]:
    """The benchmark's populations, three of each kind (the first of each is the one ``--quick`` runs).

    Closed lists: 2,000 equally likely types, of which a 10% sample of the whole (N = 120,000) sees about
    1,994; a mildly skewed list; a list in two tiers. Their wholes hold every type, none of them once.
    Saturating: Zipf-Mandelbrot populations of 6,000 and 10,000 types, of which a 10% sample sees about 87%,
    69% and 52% and the whole all, 99.9% and 99.6% (the last two keep some hapax legomena to predict).
    Open: Zipf's law with exponent 1 and 1.3 over 10 million types (far from saturating at these sizes)
    and Simon's process. Mixtures: a closed list beside an open vocabulary.
    """
    open_zipf = _zipf(10_000_000, 1.0)
    uniform = _zipf(2_000, 0.0)
    two_tiers = Multinomial(np.concatenate([np.full(200, 0.5 / 200), np.full(1_800, 0.5 / 1_800)]))
    return (
        Population("2,000 types, equally likely", CLOSED, 120_000, uniform),
        Population("2,000 types, p ~ r^-0.5", CLOSED, 120_000, _zipf(2_000, 0.5)),
        Population("200 types with half the tokens, 1,800 with the other half", CLOSED, 120_000, two_tiers),
        Population("6,000 types, p ~ r^-0.8", SATURATING, 300_000, _zipf(6_000, 0.8)),
        Population("6,000 types, p ~ (r + 10)^-1", SATURATING, 200_000, _zipf(6_000, 1.0, 10.0)),
        Population("10,000 types, p ~ r^-0.6", SATURATING, 100_000, _zipf(10_000, 0.6)),
        Population("Zipf p ~ r^-1 over 10 million types", OPEN, 200_000, open_zipf),
        Population("Simon's process, new-type probability 0.1", OPEN, 200_000, SimonProcess(0.1)),
        Population("Zipf p ~ r^-1.3 over 10 million types", OPEN, 200_000, _zipf(10_000_000, 1.3)),
        Population(
            "half the tokens from 2,000 equally likely types, half Zipf r^-1 over 10 million",
            MIXTURE,
            200_000,
            Mixture(((0.5, uniform), (0.5, open_zipf))),
        ),
        Population(
            "80% from 6,000 types p ~ r^-0.8, 20% Zipf r^-1 over 10 million",
            MIXTURE,
            200_000,
            Mixture(((0.8, _zipf(6_000, 0.8)), (0.2, open_zipf))),
        ),
        Population(
            "70% from 2,000 equally likely types, 30% Simon's process (0.1)",
            MIXTURE,
            200_000,
            Mixture(((0.7, uniform), (0.3, SimonProcess(0.1)))),
        ),
    )
