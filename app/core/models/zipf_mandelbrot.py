"""Zipf-Mandelbrot model of a population of word probabilities (Evert 2004).

Type density g(pi) = C pi^(-a-1) on 0 < pi <= B, 0 < a < 1, normalised so that integral pi g(pi) dpi = 1:
C = (1 - a) / B^(1-a). Under Poisson sampling of n tokens

    E[V_m(n)] = C n^a / m! * gamma(m - a, n B)
    E[V(n)]   = (C / a) [n^a gamma(1 - a, n B) - (1 - e^(-n B)) B^(-a)]

with gamma(s, x) the lower incomplete gamma function (unregularised). The population is infinite: V grows
without bound. The helpers below handle the density on a general range A <= pi <= B (A = 0 here), which
the finite Zipf-Mandelbrot model shares.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from scipy.special import gamma, gammainc, gammaincc, gammaln

from app.core.models.base import POPULATION_FIT_MIN_TOKENS, ArrayLike, Params, VocabularyModel, as_output
from app.core.spectrum import Spectrum


def _regularised_gamma_difference(s: ArrayLike, lo: ArrayLike, hi: ArrayLike) -> np.ndarray:
    """(gamma(s, hi) - gamma(s, lo)) / Gamma(s) for 0 <= lo <= hi, from P or Q, whichever does not cancel."""
    s, lo, hi = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (s, lo, hi)))
    upper = lo > s
    return np.where(upper, gammaincc(s, lo) - gammaincc(s, hi), gammainc(s, hi) - gammainc(s, lo))


def power_law_constant(a: float, A: float, B: float) -> float:
    """C = (1 - a) / (B^(1-a) - A^(1-a)), which makes integral_A^B pi C pi^(-a-1) dpi = 1."""
    return (1 - a) / (B ** (1 - a) - A ** (1 - a))


def power_law_spectrum(n: ArrayLike, m: ArrayLike, a: float, A: float, B: float) -> np.ndarray:
    """E[V_m(n)] = C n^a / m! [gamma(m - a, n B) - gamma(m - a, n A)], evaluated in log space."""
    n = np.asarray(n, dtype=float)
    m = np.asarray(m, dtype=float)
    with np.errstate(divide="ignore"):
        log_value = (
            np.log(power_law_constant(a, A, B))
            + a * np.log(n)
            - gammaln(m + 1)
            + gammaln(m - a)
            + np.log(_regularised_gamma_difference(m - a, n * A, n * B))
        )
    return np.exp(log_value)


def power_law_types(n: ArrayLike, a: float, A: float, B: float) -> ArrayLike:
    """E[V(n)] = integral_A^B (1 - e^(-n pi)) C pi^(-a-1) dpi, integrated by parts:

    (C / a) [(1 - e^(-n A)) A^(-a) - (1 - e^(-n B)) B^(-a) + n^a (gamma(1-a, n B) - gamma(1-a, n A))],
    which is S - integral_A^B e^(-n pi) g(pi) dpi rearranged so that no large terms cancel;
    the first term vanishes for A = 0.
    """
    n_arr = np.asarray(n, dtype=float)
    lower_term = -np.expm1(-n_arr * A) * A**-a if A > 0 else 0.0
    value = (power_law_constant(a, A, B) / a) * (
        lower_term
        + np.expm1(-n_arr * B) * B**-a
        + n_arr**a * gamma(1 - a) * _regularised_gamma_difference(1 - a, n_arr * A, n_arr * B)
    )
    return as_output(value, n)


def hapax_exponent(spectrum: Spectrum) -> float:
    """Initial a from V_2 / V_1 = (1 - a) / 2, the ratio of the formulas above when n B is large."""
    v1, v2 = max(spectrum.hapaxes, 1), max(spectrum.count(2), 1)
    return float(np.clip(1 - 2 * v2 / v1, 0.05, 0.95))


def power_law_scale(spectrum: Spectrum, a: float) -> float:
    """Initial B from V_1 = C N^a Gamma(1 - a), C = (1 - a) B^(a-1) (n B large, A = 0)."""
    B = (max(spectrum.hapaxes, 1) / ((1 - a) * spectrum.tokens**a * gamma(1 - a))) ** (1 / (a - 1))
    return float(min(B, 0.5))


class ZipfMandelbrot(VocabularyModel):
    """Zipf-Mandelbrot: g(pi) = C pi^(-a-1) on (0, B] (module docstring, Evert 2004); a is ``exponent`` and
    B ``max_probability``."""

    name = "power_law"
    title = "power law (Zipf-Mandelbrot)"
    formula = (
        "g(pi) = C pi^(-exponent-1) for 0 < pi <= max_probability; E[V_m(n)] = C n^a gamma(m - a, n B) / m!"
    )
    parameter_names = ("exponent", "max_probability")
    min_tokens = POPULATION_FIT_MIN_TOKENS
    parameter_meanings = {
        "exponent": "a, 0 < a < 1: how fast the number of types grows as probabilities fall (larger = more rare types)",
        "max_probability": "B: the probability of the most frequent type, where the power law ends",
    }
    bounds = {"exponent": (0.0, 1.0), "max_probability": (0.0, 1.0)}
    edge_parameters = ("exponent",)

    def expected_types(self, n: ArrayLike, params: Mapping[str, float]) -> ArrayLike:
        return power_law_types(n, params["exponent"], 0.0, params["max_probability"])

    def expected_spectrum(self, n: ArrayLike, m: ArrayLike, params: Mapping[str, float]) -> np.ndarray:
        return power_law_spectrum(n, m, params["exponent"], 0.0, params["max_probability"])

    def initial_guesses(self, spectrum: Spectrum) -> list[Params]:
        a = hapax_exponent(spectrum)
        return [
            {"exponent": x, "max_probability": power_law_scale(spectrum, x)} for x in (a, 0.5 * (a + 0.5))
        ]
