"""Sichel's generalised inverse Gauss-Poisson (GIGP) model of a population of word probabilities
(Sichel 1975; Baayen 2001).

Type density, normalised so that integral pi g(pi) dpi = 1 (the integral
integral_0^inf x^(nu-1) e^(-beta/x - gamma x) dx = 2 (beta/gamma)^(nu/2) K_nu(2 sqrt(beta gamma)) gives
every formula below):

    g(pi) = (2 / (b c))^(g+1) / (2 K_{g+1}(b)) * pi^(g-1) * exp(-pi / c - b^2 c / (4 pi)),   b, c > 0, -1 < g < 0,
    E[V_m(n)] = (2 / (b c)) ((b c n / 2)^m / m!) K_{m+g}(b sqrt(1 + n c)) / ((1 + n c)^((m+g)/2) K_{g+1}(b)),
    E[V(n)]   = S [1 - (1 + n c)^(-g/2) K_g(b sqrt(1 + n c)) / K_g(b)],   S = (2 / (b c)) K_g(b) / K_{g+1}(b).

K is the modified Bessel function of the second kind, evaluated as scipy.special.kve (K_nu(z) e^z) and
combined in log space, so that sizes up to n = 1e9 and beyond neither overflow nor underflow.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from scipy.special import gammaln, kve

from app.core.models.base import POPULATION_FIT_MIN_TOKENS, ArrayLike, Params, VocabularyModel, as_output
from app.core.spectrum import Spectrum

MASS_ABOVE_ONE = 0.01
"""Largest share of the tokens the fitted density may give to types more probable than 1 (impossible: a
probability is at most 1). The GIGP density runs to infinity, so some share is always there; on real text it
is negligible (below 1e-80 for the standard-library docstrings of the tests), while fits that chase a steep
Zipfian head end with a frequent scale above 1 and give it several per cent (3-31% on the demo corpora);
1% is a choice of ours between the two."""


def mass_above_one(b: float, c: float, g: float) -> float:
    """The share of the tokens that the density gives to types of probability above 1:

        integral_1^inf pi g(pi) dpi = (2 / (b c))^(g+1) / (2 K_{g+1}(b)) integral_1^inf pi^g e^(-pi/c - b^2 c/(4 pi)) dpi,

    by scipy.integrate.quad in u = ln pi, the integrand formed in log space (K as kve, module docstring)."""
    from scipy.integrate import quad  # imported on first use: a server starts without it

    log_scale = (g + 1) * np.log(2 / (b * c)) - np.log(2) - (np.log(kve(g + 1, b)) - b)

    def integrand(u: float) -> float:
        return float(np.exp(log_scale + (g + 1) * u - np.exp(u) / c - b * b * c * np.exp(-u) / 4))

    with np.errstate(all="ignore"):
        value, _ = quad(integrand, 0.0, np.inf, limit=200)
    return float(value)


class GIGP(VocabularyModel):
    """Generalised inverse Gauss-Poisson (module docstring, Sichel 1975); b is ``rare_cutoff``, c
    ``frequent_scale`` and g ``shape``."""

    name = "sichel"
    title = "Sichel mixture (generalised inverse Gauss-Poisson)"
    formula = (
        "g(pi) proportional to pi^(shape-1) exp(-pi / c - b^2 c / (4 pi)) with b = rare_cutoff, "
        "c = frequent_scale; population S = (2 / (b c)) K_g(b) / K_(g+1)(b) types"
    )
    parameter_names = ("rare_cutoff", "frequent_scale", "shape")
    min_tokens = POPULATION_FIT_MIN_TOKENS
    warm_start = False  # b trades off against c and g: on a thinned open corpus the fits from its three
    # guesses end up to 0.7 in cost apart and a warm start reaches yet another point (measured on samples of
    # 15,000 tokens from a power-law population), so its refits keep every guess
    parameter_meanings = {
        "rare_cutoff": "b > 0: sets the probability b^2 c / 4 below which types become rare; it makes the "
        "population finite",
        "frequent_scale": "c > 0: the probability scale of the frequent types",
        "shape": "g, -1 < g < 0: the power of the density between the two scales",
    }
    finite_population = True
    bounds = {"rare_cutoff": (0.0, np.inf), "frequent_scale": (0.0, np.inf), "shape": (-1.0, 0.0)}
    edge_parameters = ("shape",)

    def derived_problem(self, params: Mapping[str, float], tokens: int) -> str | None:
        """The density reaches beyond probability 1 (pi up to infinity): the share of the tokens that it
        gives to types more probable than 1, ``mass_above_one``, must stay below MASS_ABOVE_ONE."""
        share = mass_above_one(params["rare_cutoff"], params["frequent_scale"], params["shape"])
        if not share < MASS_ABOVE_ONE:
            return (
                f"it gives {share:.1%} of the tokens to types whose probability would exceed 1 "
                f"(frequent scale {params['frequent_scale']:.4g})"
            )
        return None

    def expected_types(self, n: ArrayLike, params: Mapping[str, float]) -> ArrayLike:
        b, c, g = params["rare_cutoff"], params["frequent_scale"], params["shape"]
        nc = np.asarray(n, dtype=float) * c
        root = np.sqrt(1 + nc)
        # log of (1 + n c)^(-g/2) K_g(b root) / K_g(b), with K_g(z) = kve(g, z) e^(-z) and b root - b
        # written as b n c / (root + 1) to keep small n exact.
        log_ratio = -0.5 * g * np.log1p(nc) + np.log(kve(g, b * root) / kve(g, b)) - b * nc / (root + 1)
        population = 2 / (b * c) * kve(g, b) / kve(g + 1, b)
        return as_output(-population * np.expm1(log_ratio), n)

    def population_size(self, params: Mapping[str, float]) -> float | None:
        """S = (2 / (b c)) K_g(b) / K_{g+1}(b), the limit of E[V(n)] as n grows (module docstring)."""
        b, c, g = params["rare_cutoff"], params["frequent_scale"], params["shape"]
        return float(2 / (b * c) * kve(g, b) / kve(g + 1, b))

    def expected_spectrum(self, n: ArrayLike, m: ArrayLike, params: Mapping[str, float]) -> np.ndarray:
        b, c, g = params["rare_cutoff"], params["frequent_scale"], params["shape"]
        n = np.asarray(n, dtype=float)
        m = np.asarray(m, dtype=float)
        z = b * np.sqrt(1 + n * c)
        with np.errstate(divide="ignore"):
            log_value = (
                np.log(2 / (b * c))
                + m * np.log(b * c * n / 2)
                - gammaln(m + 1)
                - 0.5 * (m + g) * np.log1p(n * c)
                + np.log(kve(m + g, z))
                - z
                - np.log(kve(g + 1, b))
                + b
            )
        return np.exp(log_value)

    def initial_guesses(self, spectrum: Spectrum) -> list[Params]:
        """g from V_2 / V_1 = (1 + g) / 2 and c from V_1 ~ N^(-g) c^(-1-g), the small-b limit of the
        formulas; b = 2 sqrt(q / (N c)) puts the lower cut-off b^2 c / 4 of the density at q / N."""
        N = spectrum.tokens
        v1, v2 = max(spectrum.hapaxes, 1), max(spectrum.count(2), 1)
        g = float(np.clip(2 * v2 / v1 - 1, -0.95, -0.05))
        c = (v1 * N**g) ** (-1 / (1 + g))
        return [
            {"rare_cutoff": 2 * np.sqrt(q / (N * c)), "frequent_scale": c, "shape": g}
            for q in (0.01, 0.1, 1.0)
        ]
