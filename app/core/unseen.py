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
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.special import bdtrc, pdtrc

from app.core.spectrum import Spectrum

NEW_TYPES = "new types in t N further tokens"
TOTAL_TYPES = "total vocabulary (seen and unseen types)"
TRUNCATIONS = ("binomial", "poisson")


@dataclass(frozen=True)
class UnseenEstimate:
    """One estimate with what it measures, the method, and the range where the method can be trusted."""

    method: str
    quantity: str
    value: float
    validity: str
    t: float | None = None


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


def good_toulmin(spectrum: Spectrum, t: float = 1.0) -> UnseenEstimate:
    """U(t) = -sum_{m>=1} (-t)^m V_m (Good & Toulmin 1956).

    Unbiased under Poisson sampling for every t, but for t > 1 the terms t^m V_m grow geometrically and the
    estimate swings wildly (it may even overflow to +-inf); trust it for t <= 1 only.
    """
    _check_t(t)
    value = _alternating_series(spectrum, t, np.ones(spectrum.m.size))
    return UnseenEstimate(
        "Good-Toulmin", NEW_TYPES, value, "reliable for t <= 1 (Good & Toulmin 1956); diverges for t > 1", t
    )


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
    Good-Toulmin; the normalised error stays small for t up to the order of log N. For t <= 1 no smoothing
    is needed and plain Good-Toulmin is returned under this name.
    """
    _check_t(t)
    _check_kind(kind)
    if t <= 1:
        weights = np.ones(spectrum.m.size)
    else:
        weights = smoothed_truncation_survival(spectrum.tokens, t, spectrum.m, kind)
    value = _alternating_series(spectrum, t, weights)
    validity = (
        f"reliable for t up to about ln N = {math.log(max(spectrum.tokens, 2)):.1f} (Orlitsky et al. 2016)"
    )
    return UnseenEstimate(f"smoothed Good-Toulmin ({kind})", NEW_TYPES, value, validity, t)


def efron_thisted(spectrum: Spectrum, t: float, terms: int = 10) -> UnseenEstimate:
    """Euler-transformed Good-Toulmin series (Efron & Thisted 1976), truncated after ``terms`` terms.

    Substituting t = u / (1 - u), u = t / (1 + t), in U(t) = sum_m (-1)^(m+1) t^m V_m and keeping the powers
    u^1..u^terms gives sum_{m<=terms} (-1)^(m+1) t^m h_m V_m with h_m = P(Bin(terms, 1 / (1 + t)) >= m).
    The number of terms is a tuning choice (Efron & Thisted compared several); 10 is our default.
    """
    _check_t(t)
    if terms < 1:
        raise ValueError("the Euler transform needs at least one term")
    weights = binomial_tail(spectrum.m, terms, 1.0 / (1.0 + t))
    value = _alternating_series(spectrum, t, weights)
    validity = (
        "a cross-check for t > 1; sensitive to the number of terms beyond t of a few (Efron & Thisted 1976)"
    )
    return UnseenEstimate(f"Efron-Thisted ({terms} terms)", NEW_TYPES, value, validity, t)


def chao1(spectrum: Spectrum, bias_corrected: bool = False) -> UnseenEstimate:
    """Chao1 lower bound of the total vocabulary (Chao 1984).

    plain:          S = V + V_1^2 / (2 V_2)
    bias-corrected: S = V + V_1 (V_1 - 1) / (2 (V_2 + 1)), used whatever ``bias_corrected`` says when V_2 = 0.
    """
    v, v1, v2 = spectrum.types, spectrum.hapaxes, spectrum.count(2)
    if bias_corrected or v2 == 0:
        value = v + v1 * (v1 - 1) / (2 * (v2 + 1))
        method = "Chao1 (bias-corrected)"
    else:
        value = v + v1 * v1 / (2 * v2)
        method = "Chao1"
    validity = "a lower bound; tight only when the unseen types are about equally rare (Chao 1984)"
    return UnseenEstimate(method, TOTAL_TYPES, float(value), validity)


def good_turing_coverage(spectrum: Spectrum) -> UnseenEstimate:
    """Sample coverage C = 1 - V_1 / N (Good 1953, after Turing): the share of further running text that
    belongs to types already seen."""
    return UnseenEstimate(
        "Good-Turing coverage",
        "share of further tokens that belong to seen types",
        1.0 - spectrum.hapaxes / spectrum.tokens,
        "for the next tokens of the same kind of text, as N grows large (Good 1953)",
    )


def new_type_rate(spectrum: Spectrum) -> UnseenEstimate:
    """V_1 / N (Good 1953, after Turing): the chance that the next token is a type not yet seen, i.e. the
    out-of-vocabulary rate a lexicon built from this corpus would meet."""
    return UnseenEstimate(
        "Good-Turing new-type rate",
        "chance that the next token is a new type",
        spectrum.hapaxes / spectrum.tokens,
        "for the next tokens of the same kind of text, as N grows large (Good 1953)",
    )


def unseen_summary(spectrum: Spectrum, ts: tuple[float, ...] = (2.0, 5.0, 10.0)) -> list[UnseenEstimate]:
    """Every estimator in one list for a page or the API: Good-Turing coverage and new-type rate, Chao1,
    Good-Toulmin at t = 1, and the smoothed Good-Toulmin and Efron-Thisted estimates at each t in ``ts``."""
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
