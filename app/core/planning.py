"""Corpus planning: the size N* at which a model reaches a vocabulary target (the inverse of prediction).

Targets:
- types V*: solve E[V(N*)] = V*;
- new-type rate r: the chance that the next token is a type not seen so far, E[V_1(N*)] / N* under Poisson
  sampling (Good 1953: the probability mass of the unseen types is estimated by V_1 / N); solve for r;
- coverage c = 1 - r: the share of running text that the vocabulary seen so far covers;
- share s of the whole population: E[V(N*)] = s S, only for models with a finite population S (finite
  Zipf-Mandelbrot, GIGP).

The predictor is what the service predicts with (``app.core.anchored.Anchored``): the exact random-sample
interpolation at or below the corpus size N and the model anchored at the observed V beyond, so that
planning is the inverse of prediction on both sides of N: plan(types = predict(n)) = n.

E[V(n)] rises and E[V_1(n)] / n falls monotonically in n for these models, so each equation has at most one
root, found by Brent's method in log n. A target outside the model's range has no root: it raises
``UnreachableTargetError`` with the reason instead of giving a number.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

from app.core.models.base import Predictor

SMALLEST = 1.0
LARGEST = 1e15  # tokens: far beyond any corpus ever collected
LARGEST_IN_WORDS = "a million billion tokens (10^15, far beyond any corpus ever collected)"


class UnreachableTargetError(ValueError):
    """The target lies outside what the model can ever reach; the message says why."""


@dataclass(frozen=True)
class Target:
    """A planning target: ``kind`` is "types", "new_type_rate", "coverage" or "share"; ``value`` its value."""

    kind: str
    value: float

    def __post_init__(self) -> None:
        if self.kind not in ("types", "new_type_rate", "coverage", "share"):
            raise ValueError(f"unknown target {self.kind!r}")
        if not math.isfinite(self.value):
            raise ValueError("the target must be a finite number")
        if self.kind == "types" and self.value <= 0:
            raise UnreachableTargetError("a target number of types must be positive")
        if self.kind != "types" and not 0 < self.value < 1:
            raise UnreachableTargetError(f"a {self.kind.replace('_', ' ')} must lie strictly between 0 and 1")


def new_type_rate(predictor: Predictor, n: float) -> float:
    """E[V_1(n)] / n: the expected chance that token n + 1 is a new type (Good 1953)."""
    return float(predictor.spectrum(n, 1)[0]) / n


def _solve(f: Callable[[float], float], what: str, lowest: str, highest: str) -> float:
    """Root of the increasing function f(n) on [SMALLEST, LARGEST], searched in log n."""
    lo, hi = math.log(SMALLEST), math.log(LARGEST)
    f_lo, f_hi = f(math.exp(lo)), f(math.exp(hi))
    if not (math.isfinite(f_lo) and math.isfinite(f_hi)):
        raise UnreachableTargetError(f"the model gives no finite {what} over the range searched")
    if f_lo > 0:
        raise UnreachableTargetError(lowest)
    if f_hi < 0:
        raise UnreachableTargetError(highest)
    from scipy.optimize import brentq  # imported on first use: a server starts without it

    return math.exp(brentq(lambda x: f(math.exp(x)), lo, hi, xtol=1e-12, rtol=1e-12))


def tokens_for_types(
    types: Callable[[float], float], target: float, population: float | None = None
) -> float:
    """N* with types(N*) = target, for an increasing growth curve ``types``."""
    if population is not None and target >= population:
        raise UnreachableTargetError(
            f"the model's whole population holds about {population:,.0f} types, so {target:,.0f} types are never reached"
        )
    return _solve(
        lambda n: float(types(n)) - target,
        "number of types",
        f"{target:,.4g} types are already expected after the first token",
        f"unreachable: the model does not reach {target:,.0f} types within {LARGEST_IN_WORDS}",
    )


def tokens_for_rate(predictor: Predictor, rate: float) -> float:
    """N* with E[V_1(N*)] / N* = rate (the new-type rate falls as the corpus grows)."""
    return _solve(
        lambda n: rate - new_type_rate(predictor, n),
        "new-type rate",
        f"the new-type rate is below {rate:g} from the very first tokens",
        f"unreachable: the model's new-type rate stays above {rate:g} within {LARGEST_IN_WORDS}",
    )


def finite_population_models() -> list[str]:
    """The models with a finite population, named in words (their titles without the bracketed detail)."""
    from app.core.models import MODELS  # the registry imports every model; planning needs it only here

    return [m.title.split(" (")[0] for m in MODELS.values() if m.finite_population]


def plan(predictor: Predictor, target: Target, population: float | None = None) -> float:
    """The size N* at which ``predictor`` reaches ``target`` (``population`` = S for share targets)."""
    if target.kind == "types":
        return tokens_for_types(predictor.types, target.value, population)
    if target.kind == "new_type_rate":
        return tokens_for_rate(predictor, target.value)
    if target.kind == "coverage":
        return tokens_for_rate(predictor, 1 - target.value)
    if population is None:
        raise UnreachableTargetError(
            "this model's population is infinite (its vocabulary grows without bound), so a share of it is "
            f"never reached; choose a model with a finite population: {' or '.join(finite_population_models())}"
        )
    return tokens_for_types(predictor.types, target.value * population, population)
