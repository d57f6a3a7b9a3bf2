"""What a number may be before it leaves the maths core: the rules every estimate passes.

Rules (each a function that returns the reason a value breaks it, or None):

- a count of types is a finite number >= 0 (``count_problem``);
- new types in t N further tokens: 0 <= U <= t N, at most one new type per further token, and, for an
  estimate made from the spectrum, U <= t V_1 (``new_types_problem``): under Poisson sampling
  E[U(t)] = sum_i e^(-N p_i) (1 - e^(-t N p_i)) <= sum_i e^(-N p_i) t N p_i = t E[V_1(N)] (as 1 - e^(-x)
  <= x: the chance of a new type can only fall as the text grows), and the estimators read E[V_1(N)] as
  the observed V_1;
- the total vocabulary, seen and unseen types, is at least the V types seen (``total_types_problem``);
- a probability lies in [0, 1] (``probability_problem``);
- a spectrum has V_1 + ... + V_k <= V for every k, the V_k counting disjoint sets of types
  (``incoherence``);
- the number of types of n tokens (``possible_types``): beyond the corpus size N the corpus is part of the
  larger text, so V <= V(n) <= V + (n - N) (each further token adds at most one type); at or below N a
  sample of n of its tokens holds at least max(min(n, 1), V - (N - n)) types (leaving out N - n tokens
  removes at most N - n types) and at most min(n, V);
- a model's parameters lie inside their domain (``parameter_problem``; each model declares its domain and
  its derived impossibilities in ``app.core.models.base``).

A value that breaks a rule is neither shown nor clipped: it becomes "not applicable" with the reason. In
JSON every object that can be not applicable carries ``"not_applicable"``: null when its numbers hold, else
the reason, and then its numbers are null.

One exception, where a mathematical bound is the honest answer: the ends of a prediction range
(``checked_prediction``). The interval of ``possible_types`` holds the truth with certainty, so a range end
outside it is replaced by the nearest bound: a range meant to hold the true V(n) loses nothing by dropping
values that V(n) cannot take (e.g. a lower end below the types already seen, or an upper end without limit
when the backtest error reaches 100%, which becomes V + (n - N)).
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np

ArrayLike = float | np.ndarray
TOLERANCE = 1e-9
"""Relative rounding allowed before a value is called impossible."""
RANGE_BOUNDS = (
    "its ends kept within the numbers of types n tokens can hold (beyond the corpus size: at least the "
    "corpus's own types, at most one new type per further token)"
)
"""How ``checked_prediction`` treats the ends of a range, in words for the range's description."""


def first_problem(problems: Iterable[str | None]) -> str | None:
    """The first reason that is not None (problems are checked in order of importance)."""
    return next((p for p in problems if p), None)


def _finite(value: float) -> bool:
    return value is not None and math.isfinite(float(value))


def count_problem(value: float, what: str = "types") -> str | None:
    """A count (of types, of tokens) is finite and >= 0."""
    if not _finite(value):
        return f"the number of {what} is not a finite number"
    if value < -TOLERANCE:
        return f"it gives a negative number of {what} ({value:,.1f})"
    return None


def new_types_problem(value: float, further_tokens: float, hapax_bound: float | None = None) -> str | None:
    """New types in ``further_tokens`` = t N further tokens: 0 <= U <= t N, and U <= ``hapax_bound`` = t V_1
    when given (module docstring)."""
    problem = count_problem(value, "new types")
    if problem:
        return problem
    if value > further_tokens * (1 + TOLERANCE):
        return (
            f"it gives more new types ({value:,.1f}) than further tokens ({further_tokens:,.0f}), "
            "at most one new type per token"
        )
    if hapax_bound is not None and value > hapax_bound * (1 + TOLERANCE) + TOLERANCE:
        return (
            f"it gives more new types ({value:,.1f}) than t V_1 = {hapax_bound:,.1f}, the most that the "
            "observed hapax legomena allow (the chance of a new type only falls as the text grows)"
        )
    return None


def total_types_problem(value: float, observed_types: int) -> str | None:
    """The total vocabulary (seen and unseen types) is at least the V types seen."""
    problem = count_problem(value)
    if problem:
        return problem
    if value < observed_types * (1 - TOLERANCE):
        return f"it gives fewer types in all ({value:,.1f}) than the {observed_types:,} already seen"
    return None


def probability_problem(value: float, what: str = "probability") -> str | None:
    """A probability (a share, a coverage, a chance) lies in [0, 1]."""
    if not _finite(value):
        return f"the {what} is not a finite number"
    if not -TOLERANCE <= value <= 1 + TOLERANCE:
        return f"it gives a {what} of {value:.4g}, outside [0, 1]"
    return None


def incoherence(types: float, legomena: np.ndarray) -> str | None:
    """The reason why (V, V_1..V_K) cannot be a spectrum, or None: every value finite and non-negative,
    and V_1 + ... + V_k <= V for every k."""
    values = np.concatenate(([types], np.asarray(legomena, dtype=float)))
    if not np.all(np.isfinite(values)) or np.any(values < 0):
        return "it gives negative or non-finite expectations"
    partial = np.cumsum(legomena)
    over = np.flatnonzero(partial > types * (1 + TOLERANCE) + TOLERANCE)
    if over.size:
        k = int(over[0]) + 1
        return (
            f"it predicts more legomena than types (V_1 + ... + V_{k} = {partial[k - 1]:,.1f} > "
            f"V = {types:,.1f})"
        )
    return None


def possible_types(n: ArrayLike, corpus_tokens: int, corpus_types: int) -> tuple[ArrayLike, ArrayLike]:
    """The interval [lowest, highest] that the number of types of n tokens can take (module docstring):
    beyond N [V, V + (n - N)]; at or below N [max(min(n, 1), V - (N - n)), min(n, V)]. Floats for a
    scalar n, arrays for an array."""
    size = np.asarray(n, dtype=float)
    N, V = corpus_tokens, corpus_types
    beyond = size > N
    lowest = np.where(beyond, V, np.maximum(np.minimum(size, 1.0), V - (N - size)))
    highest = np.where(beyond, V + (size - N), np.minimum(size, V))
    return (float(lowest), float(highest)) if np.ndim(n) == 0 else (lowest, highest)


def range_within_possible(
    n: ArrayLike, low: ArrayLike, high: ArrayLike, corpus_tokens: int, corpus_types: int
) -> tuple[np.ndarray, np.ndarray]:
    """The ends of ranges of V(n) (arrays or scalars alike) brought inside ``possible_types``: the one
    exception of the module docstring, where the bound is the honest answer. A NaN end becomes the bound."""
    lowest, highest = possible_types(np.asarray(n, dtype=float), corpus_tokens, corpus_types)
    low, high = np.asarray(low, dtype=float), np.asarray(high, dtype=float)
    return np.where(low >= lowest, low, lowest), np.where(high <= highest, high, highest)


def types_problem(n: float, types: float, corpus_tokens: int, corpus_types: int) -> str | None:
    """E[V(n)] outside ``possible_types``: the reason, else None."""
    problem = count_problem(types)
    if problem:
        return problem
    lowest, highest = possible_types(n, corpus_tokens, corpus_types)
    slack = TOLERANCE * max(abs(highest), 1.0)
    if types < lowest - slack:
        if n > corpus_tokens:
            return f"it gives fewer types ({types:,.1f}) than the corpus already holds ({corpus_types:,})"
        return f"it gives fewer types ({types:,.1f}) than any sample of {n:,.0f} tokens holds ({lowest:,.0f})"
    if types > highest + slack:
        return (
            f"it gives more types ({types:,.1f}) than {n:,.0f} tokens can hold ({highest:,.0f}: at most one "
            "new type per token)"
        )
    return None


def parameter_problem(
    name: str, value: float, bounds: tuple[float, float], edge_share: float | None
) -> str | None:
    """A parameter outside its open domain (lo, hi), or, when ``edge_share`` is given (a parameter whose
    domain ends are limiting cases the fit can run to, such as an exponent at 0 or 1), within
    ``edge_share`` of the domain's width from one of its ends: the reason, else None."""
    lo, hi = bounds
    shown = name.replace("_", " ")
    if not _finite(value):
        return f"its {shown} is not a finite number"
    if not lo < value < hi:
        return f"its {shown} = {value:.4g} lies outside its domain ({lo:g}, {hi:g})"
    if edge_share is not None and math.isfinite(lo) and math.isfinite(hi):
        margin = edge_share * (hi - lo)
        if value - lo < margin or hi - value < margin:
            end = lo if value - lo < margin else hi
            return f"its {shown} = {value:.8g} ran to the edge {end:g} of its domain ({lo:g}, {hi:g})"
    return None


class PredictorOnBothSides(Protocol):
    """What ``checked_prediction`` reads: a predictor anchored at a corpus (``app.core.anchored``)."""

    predictor: Any
    corpus: Any

    def types(self, n: float) -> float: ...

    def spectrum(self, n: float, k_max: int = 20) -> np.ndarray: ...

    def types_low(self, n: float) -> float: ...

    def types_high(self, n: float) -> float: ...


@dataclass(frozen=True)
class CheckedPrediction:
    """E[V(n)] with its range and E[V_k(n)], k = 1..k_max, that passed the rules; or, when
    ``not_applicable`` holds the reason, no numbers at all."""

    tokens: float
    types: float | None
    types_low: float | None
    types_high: float | None
    legomena: np.ndarray | None
    not_applicable: str | None = None

    @classmethod
    def refused(cls, tokens: float, reason: str) -> CheckedPrediction:
        return cls(tokens, None, None, None, None, reason)


def checked_prediction(anchored: PredictorOnBothSides, n: float, k_max: int = 20) -> CheckedPrediction:
    """The prediction of ``anchored`` at n after the rules of the module docstring: beyond N a degenerate
    fit (``FittedModel.degenerate``) or a predictor that raises ValueError (a model that cannot be continued
    from the corpus) is not applicable; E[V(n)] must lie in ``possible_types`` and
    (V, V_1..V_k) be a spectrum (``incoherence``); the range's ends are brought inside ``possible_types``
    (the one exception of the module docstring)."""
    N, V = anchored.corpus.tokens, anchored.corpus.types
    degenerate = getattr(anchored.predictor, "degenerate", None) if n > N else None
    if degenerate:
        return CheckedPrediction.refused(n, f"its fit is degenerate: {degenerate}")
    try:
        with np.errstate(all="ignore"):
            types = float(anchored.types(n))
            legomena = np.asarray(anchored.spectrum(n, k_max), dtype=float)
    except (ValueError, ArithmeticError) as exc:  # e.g. a model that cannot be continued from the corpus
        return CheckedPrediction.refused(n, str(exc) or type(exc).__name__)
    problem = first_problem((types_problem(n, types, N, V), incoherence(types, legomena)))
    if problem:
        return CheckedPrediction.refused(n, problem)
    low, high = range_within_possible(n, anchored.types_low(n), anchored.types_high(n), N, V)
    return CheckedPrediction(n, types, float(low), float(high), legomena)
