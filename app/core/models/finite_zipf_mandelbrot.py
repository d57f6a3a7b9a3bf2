"""Finite Zipf-Mandelbrot model of a population of word probabilities (Evert 2004).

Type density g(pi) = C pi^(-a-1) on A <= pi <= B, 0 < a < 1, C = (1 - a) / (B^(1-a) - A^(1-a)); the
population holds S = C (A^(-a) - B^(-a)) / a types. Under Poisson sampling of n tokens

    E[V_m(n)] = C n^a / m! [gamma(m - a, n B) - gamma(m - a, n A)]
    E[V(n)]   = S - integral_A^B e^(-n pi) C pi^(-a-1) dpi, with, by parts,
    integral_A^B e^(-n pi) pi^(-a-1) dpi = (A^(-a) e^(-n A) - B^(-a) e^(-n B)) / a
                                         - (n^a / a) [gamma(1-a, n B) - gamma(1-a, n A)].

Parameters are fitted as (logit a, log B, logit(A / B)) so that 0 < A < B always holds.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np
from scipy.special import expit, logit

from app.core.models.base import POPULATION_FIT_MIN_TOKENS, ArrayLike, Params, VocabularyModel
from app.core.models.zipf_mandelbrot import (
    hapax_exponent,
    power_law_constant,
    power_law_scale,
    power_law_spectrum,
    power_law_types,
)
from app.core.spectrum import Spectrum


class FiniteZipfMandelbrot(VocabularyModel):
    """Finite Zipf-Mandelbrot: g(pi) = C pi^(-a-1) on [A, B] (module docstring, Evert 2004); a is ``exponent``,
    A ``min_probability`` and B ``max_probability``."""

    name = "bounded_power_law"
    title = "bounded power law (finite Zipf-Mandelbrot)"
    formula = (
        "g(pi) = C pi^(-exponent-1) for min_probability <= pi <= max_probability; "
        "population S = C (A^-a - B^-a) / a types"
    )
    parameter_names = ("exponent", "min_probability", "max_probability")
    min_tokens = POPULATION_FIT_MIN_TOKENS
    parameter_meanings = {
        "exponent": "a, 0 < a < 1: how fast the number of types grows as probabilities fall",
        "min_probability": "A: the probability of the rarest type; it makes the population finite",
        "max_probability": "B: the probability of the most frequent type",
    }
    finite_population = True
    bounds = {"exponent": (0.0, 1.0), "min_probability": (0.0, 1.0), "max_probability": (0.0, 1.0)}
    """The domain (its own coordinates fit a, B and A / B; see ``to_unconstrained``)."""
    edge_parameters = ("exponent",)

    def derived_problem(self, params: Mapping[str, float], tokens: int) -> str | None:
        """The rarest type cannot be more probable than the most frequent one: A < B."""
        a, A, B = self._abc(params)
        if not A < B:
            return f"its min probability {A:.4g} is not below its max probability {B:.4g}"
        return None

    def expected_types(self, n: ArrayLike, params: Mapping[str, float]) -> ArrayLike:
        a, A, B = self._abc(params)
        return power_law_types(n, a, A, B)

    @staticmethod
    def _abc(params: Mapping[str, float]) -> tuple[float, float, float]:
        return params["exponent"], params["min_probability"], params["max_probability"]

    def population_size(self, params: Mapping[str, float]) -> float | None:
        """S = C (A^(-a) - B^(-a)) / a (module docstring)."""
        a, A, B = self._abc(params)
        return float(power_law_constant(a, A, B) * (A**-a - B**-a) / a)

    def expected_spectrum(self, n: ArrayLike, m: ArrayLike, params: Mapping[str, float]) -> np.ndarray:
        return power_law_spectrum(n, m, *self._abc(params))

    def to_unconstrained(self, params: Mapping[str, float]) -> np.ndarray:
        a, A, B = self._abc(params)
        return np.array([float(logit(a)), math.log(B), float(logit(A / B))])

    def from_unconstrained(self, theta: np.ndarray) -> Params:
        B = math.exp(theta[1])
        return {
            "exponent": float(expit(theta[0])),
            "min_probability": B * float(expit(theta[2])),
            "max_probability": B,
        }

    def initial_guesses(self, spectrum: Spectrum) -> list[Params]:
        """a and B as for Zipf-Mandelbrot; A from a population of 2, 5 or 20 times the observed types,
        using S ~ C A^(-a) / a with C ~ (1 - a) B^(a-1) (A << B)."""
        a = hapax_exponent(spectrum)
        B = power_law_scale(spectrum, a)
        C = (1 - a) * B ** (a - 1)
        guesses = []
        for multiple in (2.0, 5.0, 20.0):
            A = (a * multiple * spectrum.types / C) ** (-1 / a)
            guesses.append({"exponent": a, "min_probability": min(A, 0.5 * B), "max_probability": B})
        return guesses
