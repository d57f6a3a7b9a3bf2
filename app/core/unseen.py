"""Unseen vocabulary: how many new types further text would bring, and how many types exist.

All estimators read only the frequency spectrum V_m of a corpus of N tokens. "t" is the size of the
further text as a multiple of N (t = 1: as much text again).

- Good-Toulmin (Good & Toulmin 1956): U(t) = -sum_{m>=1} (-t)^m V_m, new types in t N further tokens.
- Smoothed Good-Toulmin (Orlitsky, Suresh & Wu 2016): U_L(t) = -sum_m (-t)^m P(L >= m) V_m with a random
  truncation point L, binomial or Poisson.
- Efron-Thisted (1976): the Euler transform of the Good-Toulmin series, truncated after a few terms.
- Chao1 (Chao 1984): lower bound of the total vocabulary, S >= V + V_1^2 / (2 V_2).
- Good-Turing (Good 1953, after Turing): coverage 1 - V_1 / N; V_1 / N is the chance that the next token
  is a new type.

Every estimate passes its method's range of validity, as its source states it, and the rules of
``app.core.validity`` (new types 0 <= U <= min(t N, t V_1), a total vocabulary >= V, a probability in
[0, 1]); one that fails is returned without a number, ``not_applicable`` giving the reason:

- Good-Toulmin: t <= 1. For t > 1 its variance grows without bound (Good & Toulmin 1956: "when A > 2,
  this variance becomes in general very large, so that the estimate is useless without some
  modification", A being our t); Orlitsky, Suresh & Wu (2016) state that it predicts U "for all t <= 1".
- Smoothed Good-Toulmin: t <= log_10 N. Orlitsky, Suresh & Wu (2016, PNAS 113(47):13283-13288) prove
  that it predicts U "all the way up to t proportional to log n" and that no estimator can go further:
  its normalised mean squared error E[(U_L - U)^2] / (t N)^2 is bounded by N^(-1/t) up to a constant
  (the constant and the exact form of the bound from memory). We keep the range where N^(-1/t) <= 1/10,
  i.e. t <= log_10 N (a choice of ours within "proportional to log N").
- Efron-Thisted: t < 5. The Euler transformation of the series, on which Efron & Thisted (1976) built
  this estimator, overcomes the growing variance "at least for A < 5" (Good & Toulmin 1956).
- Chao1: always >= V (a lower bound of the total vocabulary, Chao 1984); checked all the same.

Even inside its range an estimator can return an impossible value: on a saturating vocabulary (fewer
hapax than dis legomena, V_1 < V_2, as in controlled vocabularies or word lists) the alternating series
turn negative. The error bound above is relative to t N, not to U, so when U is a tiny share of t N (few new
types are left to find) a negative value is within it: the estimator cannot tell U from 0 there, and the
value is not applicable rather than clipped to 0.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.special import bdtrc, pdtrc

from app.core.spectrum import Spectrum
from app.core.validity import (
    first_problem,
    new_types_problem,
    probability_problem,
    total_types_problem,
)

NEW_TYPES = "new types in t N further tokens"
TOTAL_TYPES = "total vocabulary (seen and unseen types)"
TRUNCATIONS = ("binomial", "poisson")


GOOD_TOULMIN_MAX_T = 1.0
EULER_MAX_T = 5.0  # exclusive
SMOOTHED_ERROR_BOUND = 0.1
"""The normalised mean squared error bound N^(-1/t) up to which smoothed Good-Toulmin is applied: t <=
ln N / ln(1 / 0.1) = log_10 N (module docstring)."""


@dataclass(frozen=True)
class UnseenEstimate:
    """One estimate with what it measures, the method, and the range where the method can be trusted;
    ``value`` is None and ``not_applicable`` says why when the estimate is outside that range or impossible."""

    method: str
    quantity: str
    value: float | None
    validity: str
    t: float | None = None
    not_applicable: str | None = None

    @classmethod
    def judged(
        cls, method: str, quantity: str, value: float, validity: str, t: float | None, problem: str | None
    ) -> UnseenEstimate:
        """The estimate, or its method and reason without a number when ``problem`` holds one."""
        if problem:
            return cls(method, quantity, None, validity, t, problem)
        return cls(method, quantity, float(value), validity, t)


def smoothed_max_t(tokens: int) -> float:
    """The largest t at which smoothed Good-Toulmin is applied: N^(-1/t) <= SMOOTHED_ERROR_BOUND, i.e.
    t <= ln N / ln(1 / SMOOTHED_ERROR_BOUND) (module docstring; never below 1, where no smoothing is needed)."""
    return max(1.0, math.log(max(tokens, 1)) / math.log(1 / SMOOTHED_ERROR_BOUND))


def _beyond(t: float, inside: bool, stated_range: str) -> str | None:
    """The reason why t is outside the method's ``stated_range`` (with its source), or None."""
    return None if inside else f"t = {t:g} is beyond its range {stated_range}"


def binomial_tail(m: np.ndarray, trials: int, q: float) -> np.ndarray:
    """P(L >= m) for L ~ Binomial(trials, q): the survival function at m - 1 (scipy.special.bdtrc, the
    sum of the terms m..trials), 0 for m > trials and 1 for m <= 0."""
    m = np.asarray(m, dtype=float)
    inside = np.clip(m - 1, 0, max(trials - 1, 0))
    return np.where(m <= 0, 1.0, np.where(m - 1 < trials, bdtrc(inside, trials, q), 0.0))


def _alternating_series(spectrum: Spectrum, t: float, weights: np.ndarray) -> float:
    """-sum_m (-t)^m w_m V_m over the spectrum, each term formed in log space: (-1)^(m+1) t^m w_m V_m."""
    m = spectrum.m.astype(float)
    with np.errstate(divide="ignore", over="ignore"):
        log_abs = m * math.log(t) + np.log(weights) + np.log(spectrum.vm)
        terms = np.where(m % 2 == 1, 1.0, -1.0) * np.exp(log_abs)
    # fsum rounds the alternating sum once; it refuses inf - inf, which np.sum turns into nan
    return float(math.fsum(terms)) if np.all(np.isfinite(terms)) else float(np.sum(terms))


def _check_t(t: float) -> None:
    if not t > 0:
        raise ValueError("t, the further text as a multiple of the corpus size, must be positive")


def _check_kind(kind: str) -> None:
    if kind not in TRUNCATIONS:
        raise ValueError(f"unknown truncation kind {kind!r} (use one of {TRUNCATIONS})")


def good_toulmin_series(spectrum: Spectrum, t: float) -> float:
    """U(t) = -sum_{m>=1} (-t)^m V_m itself, unchecked: a term inside other formulas (the population variance
    of ``app.core.comparison``), never a number to show; ``good_toulmin`` is the checked estimate."""
    _check_t(t)
    return _alternating_series(spectrum, t, np.ones(spectrum.m.size))


def good_toulmin(spectrum: Spectrum, t: float = 1.0) -> UnseenEstimate:
    """U(t) = -sum_{m>=1} (-t)^m V_m (Good & Toulmin 1956).

    Unbiased under Poisson sampling for every t, but for t > 1 the terms t^m V_m grow geometrically and the
    estimate swings wildly (it may even overflow to +-inf): not applicable beyond t = 1 (module docstring).
    """
    value = good_toulmin_series(spectrum, t)
    problem = first_problem(
        (
            _beyond(t, t <= GOOD_TOULMIN_MAX_T, "t <= 1 (Good & Toulmin 1956)"),
            new_types_problem(value, t * spectrum.tokens, t * spectrum.hapaxes),
        )
    )
    validity = "reliable for t <= 1 (Good & Toulmin 1956); diverges for t > 1"
    return UnseenEstimate.judged("Good-Toulmin", NEW_TYPES, value, validity, t, problem)


def smoothed_truncation_survival(
    n_tokens: int, t: float, m: np.ndarray, kind: str = "binomial"
) -> np.ndarray:
    """P(L >= m) for the random truncation L of the smoothed Good-Toulmin estimator (t > 1).

    Orlitsky, Suresh & Wu (2016):
      binomial: L ~ Bin(k, q), k = round(0.5 log_3(N t^2 / (t - 1))), q = 2 / (t + 2);
      poisson:  L ~ Poisson(r), r = ln(N (t + 1)^2 / (t - 1)) / (2 t).
    """
    if t <= 1:
        raise ValueError("the random truncation is defined for t > 1; use plain Good-Toulmin for t <= 1")
    _check_kind(kind)
    m = np.asarray(m, dtype=float)
    if kind == "binomial":
        trials = max(1, round(0.5 * math.log(n_tokens * t * t / (t - 1), 3)))
        return binomial_tail(m, trials, 2.0 / (t + 2.0))
    rate = math.log(n_tokens * (t + 1) ** 2 / (t - 1)) / (2 * t)
    return pdtrc(m - 1, rate)  # the Poisson survival function P(L > m - 1)


def smoothed_good_toulmin(spectrum: Spectrum, t: float, kind: str = "binomial") -> UnseenEstimate:
    """U_L(t) = -sum_m (-t)^m P(L >= m) V_m (Orlitsky, Suresh & Wu 2016, PNAS).

    The random truncation L (see ``smoothed_truncation_survival``) damps the exploding high-order terms of
    Good-Toulmin; the normalised error stays small for t up to the order of log N: applied up to
    ``smoothed_max_t`` = log_10 N (module docstring). For t <= 1 no smoothing is needed and plain
    Good-Toulmin is returned under this name.
    """
    _check_t(t)
    _check_kind(kind)
    if t <= 1:
        weights = np.ones(spectrum.m.size)
    else:
        weights = smoothed_truncation_survival(spectrum.tokens, t, spectrum.m, kind)
    value = _alternating_series(spectrum, t, weights)
    method = f"smoothed Good-Toulmin ({kind})"
    largest = smoothed_max_t(spectrum.tokens)
    problem = first_problem(
        (
            _beyond(t, t <= largest, f"t <= log_10 N = {largest:.2f} (Orlitsky, Suresh & Wu 2016)"),
            new_types_problem(value, t * spectrum.tokens, t * spectrum.hapaxes),
        )
    )
    validity = f"reliable for t up to log_10 N = {largest:.1f} (Orlitsky, Suresh & Wu 2016)"
    return UnseenEstimate.judged(method, NEW_TYPES, value, validity, t, problem)


def efron_thisted(spectrum: Spectrum, t: float, terms: int = 10) -> UnseenEstimate:
    """Euler-transformed Good-Toulmin series (Efron & Thisted 1976), truncated after ``terms`` terms.

    Substituting t = u / (1 - u), u = t / (1 + t), in U(t) = sum_m (-1)^(m+1) t^m V_m and keeping the powers
    u^1..u^terms gives sum_{m<=terms} (-1)^(m+1) t^m h_m V_m with h_m = P(Bin(terms, 1 / (1 + t)) >= m).
    The number of terms is a tuning choice (Efron & Thisted compared several); 10 is our default. Not
    applicable from t = 5 on (module docstring).
    """
    _check_t(t)
    if terms < 1:
        raise ValueError("the Euler transform needs at least one term")
    weights = binomial_tail(spectrum.m, terms, 1.0 / (1.0 + t))
    value = _alternating_series(spectrum, t, weights)
    method = f"Efron-Thisted ({terms} terms)"
    problem = first_problem(
        (
            _beyond(t, t < EULER_MAX_T, "t < 5 (Good & Toulmin 1956, for the Euler transformation)"),
            new_types_problem(value, t * spectrum.tokens, t * spectrum.hapaxes),
        )
    )
    validity = "a cross-check for 1 < t < 5, sensitive to the number of terms (Efron & Thisted 1976)"
    return UnseenEstimate.judged(method, NEW_TYPES, value, validity, t, problem)


def chao1(spectrum: Spectrum, bias_corrected: bool = False) -> UnseenEstimate:
    """Chao1 lower bound of the total vocabulary (Chao 1984).

    plain:          S = V + V_1^2 / (2 V_2)
    bias-corrected: S = V + V_1 (V_1 - 1) / (2 (V_2 + 1)), used whatever ``bias_corrected`` says when V_2 = 0.

    Both add a non-negative term to V, so S >= V always (checked all the same, ``total_types_problem``).
    """
    v, v1, v2 = spectrum.types, spectrum.hapaxes, spectrum.count(2)
    if bias_corrected or v2 == 0:
        value = v + v1 * (v1 - 1) / (2 * (v2 + 1))
        method = "Chao1 (bias-corrected)"
    else:
        value = v + v1 * v1 / (2 * v2)
        method = "Chao1"
    validity = "a lower bound; tight only when the unseen types are about equally rare (Chao 1984)"
    return UnseenEstimate.judged(method, TOTAL_TYPES, value, validity, None, total_types_problem(value, v))


def good_turing_coverage(spectrum: Spectrum) -> UnseenEstimate:
    """Sample coverage C = 1 - V_1 / N (Good 1953, after Turing): the share of further running text that
    belongs to types already seen."""
    value = 1.0 - spectrum.hapaxes / spectrum.tokens
    return UnseenEstimate.judged(
        "Good-Turing coverage",
        "share of further tokens that belong to seen types",
        value,
        "for the next tokens of the same kind of text, as N grows large (Good 1953)",
        None,
        probability_problem(value, "coverage"),
    )


def new_type_rate(spectrum: Spectrum) -> UnseenEstimate:
    """V_1 / N (Good 1953, after Turing): the chance that the next token is a type not yet seen, i.e. the
    out-of-vocabulary rate a lexicon built from this corpus would meet."""
    value = spectrum.hapaxes / spectrum.tokens
    return UnseenEstimate.judged(
        "Good-Turing new-type rate",
        "chance that the next token is a new type",
        value,
        "for the next tokens of the same kind of text, as N grows large (Good 1953)",
        None,
        probability_problem(value, "new-type rate"),
    )


def unseen_summary(spectrum: Spectrum, ts: tuple[float, ...] = (2.0, 4.0, 10.0)) -> list[UnseenEstimate]:
    """Every estimator in one list for a page or the API: Good-Turing coverage and new-type rate, Chao1,
    Good-Toulmin at t = 1, and the smoothed Good-Toulmin and Efron-Thisted estimates at each t in ``ts``
    (t = 10 shows where prediction ends: within range only for N >= 10^10 tokens and never for
    Efron-Thisted). Each row is an estimate or the reason it is not applicable."""
    if spectrum.tokens == 0:
        raise ValueError("an empty corpus has no spectrum to extrapolate from")
    rows = [
        good_turing_coverage(spectrum),
        new_type_rate(spectrum),
        chao1(spectrum),
        good_toulmin(spectrum, 1.0),
    ]
    for t in ts:
        rows.append(smoothed_good_toulmin(spectrum, t))
        rows.append(efron_thisted(spectrum, t))
    return rows
