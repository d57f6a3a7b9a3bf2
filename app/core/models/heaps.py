"""Heaps' law V = K N^beta (Heaps 1978; Herdan 1960).

Fitted by least squares of log E[V(n)] on log n over the upper decade [N/10, N] of the random-order
expected growth curve (the exact hypergeometric interpolation of the spectrum): fitting from tiny n
biases beta upward.

Heaps' law says nothing about the legomena. We derive them from one stated assumption: the curve K n^beta
is the expected growth curve of Poisson samples from some population at every size. Differentiating
E[V(n)] = sum_i (1 - e^(-n pi_i)) k times gives the identity E[V_k(n)] = (-1)^(k+1) n^k / k! d^k E[V(n)] / dn^k,
hence

    E[V_k(n)] = K n^beta (-1)^(k+1) C(beta, k) = K n^beta beta Gamma(k - beta) / (Gamma(1 - beta) k!),

so the hapax share is beta and the shares sum to 1 (the spectrum of a regularly varying population,
Karlin 1967).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from scipy.special import gammaln

from app.core.interpolation import expected_types
from app.core.models.base import ArrayLike, FittedModel, VocabularyModel, as_output
from app.core.models.goodness import GoodnessOfFit
from app.core.spectrum import Spectrum

FIT_POINTS = 12


def fit_power_law(sizes: np.ndarray, types: np.ndarray) -> tuple[float, float]:
    """(K, beta) minimising sum (log V - log K - beta log n)^2 (ordinary least squares in log-log)."""
    beta, log_k = np.polyfit(np.log(sizes), np.log(types), 1)
    return float(np.exp(log_k)), float(beta)


class Heaps(VocabularyModel):
    """Heaps' law V = K n^beta with the legomena of the stated assumption (module docstring)."""

    name = "heaps"
    title = "Heaps' law"
    formula = "E[V(n)] = scale n^exponent; E[V_k(n)] = scale n^b b Gamma(k - b) / (Gamma(1 - b) k!)"
    parameter_names = ("scale", "exponent")
    parameter_meanings = {
        "scale": "K: the number of types at n = 1 on the fitted line",
        "exponent": "beta, 0 < beta < 1: the slope of log types against log tokens (also the hapax share)",
    }
    bounds = {"scale": (0.0, np.inf), "exponent": (0.0, 1.0)}
    """beta <= 0 would let the types fall or stay, beta >= 1 grow faster than the tokens; the legomena's
    Gamma(1 - beta) needs beta < 1."""

    def expected_types(self, n: ArrayLike, params: Mapping[str, float]) -> ArrayLike:
        return as_output(params["scale"] * np.asarray(n, dtype=float) ** params["exponent"], n)

    def expected_spectrum(self, n: ArrayLike, m: ArrayLike, params: Mapping[str, float]) -> np.ndarray:
        beta = params["exponent"]
        m = np.asarray(m, dtype=float)
        shares = beta * np.exp(gammaln(m - beta) - gammaln(1 - beta) - gammaln(m + 1))
        return np.asarray(self.expected_types(n, params)) * shares

    def fit(
        self, spectrum: Spectrum, m_max: int = 15, near: Mapping[str, float] | None = None
    ) -> FittedModel:
        # closed form: ``near``, the start of a least-squares fit, has no use here
        """Least squares in log-log on the exact random-order curve at FIT_POINTS sizes in [N/10, N]."""
        N = spectrum.tokens
        if spectrum.types < 2:
            raise ValueError("Heaps' law needs at least two types")
        sizes = np.unique(np.geomspace(max(N / 10, 1), N, FIT_POINTS).round().astype(np.int64))
        growth = np.array([expected_types(spectrum, int(n)) for n in sizes])
        K, beta = fit_power_law(sizes, growth)
        return FittedModel(self, {"scale": K, "exponent": beta}, N, spectrum, m_max)

    def goodness_of_fit(
        self, spectrum: Spectrum, params: Mapping[str, float], m_max: int = 15
    ) -> GoodnessOfFit:
        reason = (
            "Heaps' law is fitted to the growth curve, not to the spectrum, and defines no population of "
            "types, so the Poisson chi-square of the spectrum does not apply"
        )
        return GoodnessOfFit(m_max, reason=reason)
