"""Test helpers: type densities written out from their definitions, and Poisson samples drawn from them.

The densities are typed here independently of app.core.models (from Evert 2004 for the Zipf-Mandelbrot
family and Sichel 1975 / Baayen 2001 for GIGP), so that the closed forms can be checked against direct
numerical integration of E[V(N)] = int (1 - e^{-N pi}) g(pi) dpi and E[V_m(N)] = int e^{-N pi} (N pi)^m / m! g(pi) dpi.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from scipy.integrate import cumulative_trapezoid, quad
from scipy.special import gammaln, kv

from app.core.spectrum import Spectrum

Density = Callable[[np.ndarray], np.ndarray]


def power_law_density(a: float, A: float, B: float) -> Density:
    """g(pi) = C pi^(-a-1) on [A, B], C = (1 - a) / (B^(1-a) - A^(1-a)) (A = 0: Zipf-Mandelbrot)."""
    C = (1 - a) / (B ** (1 - a) - A ** (1 - a))
    return lambda pi: np.where((pi >= A) & (pi <= B), C * np.asarray(pi, dtype=float) ** (-a - 1), 0.0)


def gigp_density(b: float, c: float, g: float) -> Density:
    """g(pi) = (2/(b c))^(g+1) / (2 K_{g+1}(b)) pi^(g-1) exp(-pi/c - b^2 c / (4 pi))."""
    scale = (2 / (b * c)) ** (g + 1) / (2 * kv(g + 1, b))
    return lambda pi: scale * pi ** (g - 1) * np.exp(-pi / c - b * b * c / (4 * pi))


def integrate_log(f: Callable[[float], float], lo: float, hi: float, n: float) -> float:
    """int_lo^hi f(pi) dpi by scipy.integrate.quad in u = ln pi, with a breakpoint at pi = 1/n."""
    value, _ = quad(
        lambda u: f(np.exp(u)) * np.exp(u),
        np.log(lo),
        np.log(hi),
        points=[-np.log(n)] if lo < 1 / n < hi else None,
        limit=500,
        epsabs=0.0,
        epsrel=1e-11,
    )
    return value


def expected_types_by_quad(density: Density, lo: float, hi: float, n: float) -> float:
    return integrate_log(lambda p: -np.expm1(-n * p) * density(p), lo, hi, n)


def expected_count_by_quad(density: Density, lo: float, hi: float, n: float, m: int) -> float:
    return integrate_log(
        lambda p: np.exp(-n * p + m * np.log(n * p) - gammaln(m + 1)) * density(p), lo, hi, n
    )


def stratified_population(density: Density, lo: float, hi: float, grid: int = 200_000) -> np.ndarray:
    """Type probabilities of a finite population drawn from g: the number of types S = int g (rounded),
    and pi_i at the quantiles (i - 1/2) / S of g / S, by numeric inverse CDF on a log grid (trapezoid rule)."""
    u = np.linspace(np.log(lo), np.log(hi), grid)
    weight = density(np.exp(u)) * np.exp(u)
    cdf = np.concatenate(([0.0], cumulative_trapezoid(weight, u)))
    size = int(round(cdf[-1]))
    return np.exp(np.interp((np.arange(size) + 0.5) / size * cdf[-1], cdf, u))


def poisson_sample(pi: np.ndarray, n: float, rng: np.random.Generator) -> Spectrum:
    """Counts f_i ~ Poisson(n pi_i) for every type; the spectrum of the types seen."""
    counts = rng.poisson(n * pi)
    return Spectrum.from_frequencies(counts[counts > 0])
