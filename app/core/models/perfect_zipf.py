"""The perfect-Zipf model: a corpus that is perfectly Zipfian at some size Z.

A perfectly Zipfian corpus of W types has the spectrum V_m = W / (m (m+1)) (Zipf's law in its frequency-
spectrum form; Lotka's law applied to words). A random fraction x = n / Z of it holds, by the binomial
interpolation formula,

    E(x)   = W sum_m (1 - (1-x)^m) / (m (m+1)) = W x ln x / (x - 1)          (E(1) = W)
    E_k(x) = W integral_0^1 [(1-t) / d] (t x / d)^(k-1) (x / d) dt,  d = 1 - t + t x,
    E_1(x) = W x (x - 1 - ln x) / (x - 1)^2,  hapax share h(x) = E_1 / E = 1 / ln x - 1 / (x - 1).

x > 1 treats the corpus as a sample of a larger perfectly Zipfian one; the formulas still hold. The
integral is computed after substituting w = 1 - t x / d (so t x / d = 1 - w and dw = -x / d^2 dt):

    E_k(x) = W integral_0^1 x w (1-w)^(k-1) / (x w + 1 - w) dw,

a smooth integrand whose only feature, of width min(x, 1/x), sits at w = 1 / (1 + x); scipy's adaptive
quad_vec integrates all k at once with that point as a breakpoint, for every x > 0.

Fitting from (N, V, V_1): solve h(x) = V_1 / V (h falls from 1 to 0), then Z = N / x and
W = V (x - 1) / (x ln x). From totals only (N, V) the model assumes x = 1: Z = N, W = V, E_k = V / (k (k+1)).
The model's corpus has infinitely many tokens in its tail (sum m V_m diverges): use it for types and
legomena only.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from functools import lru_cache

import numpy as np

from app.core.models.base import ArrayLike, FittedModel, Params, VocabularyModel, as_output
from app.core.spectrum import Spectrum

_LOG_X_LIMIT = 700.0  # |ln x| beyond which x over- or underflows a double
_TINY_X = 1e-15  # below this fraction the leading terms of E_k(x) are exact to double precision
_SHARES_CACHED = 4096  # (x, k) pairs of legomena_shares kept
_SERIES_LIMIT = 1e-3  # below |ln x| = 1e-3 the Bernoulli series is used (its next term, s^5/30240, < 1e-19)


def growth_factor(x: ArrayLike) -> np.ndarray:
    """E(x) / W = x ln x / (x - 1), computed as s e^s / (e^s - 1) with s = ln x (1 at x = 1)."""
    s = np.log(np.asarray(x, dtype=float))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(s == 0, 1.0, s * np.exp(s) / np.expm1(s))


def hapax_share(x: ArrayLike) -> np.ndarray:
    """h(x) = 1 / ln x - 1 / (x - 1); near x = 1 from 1/s - 1/(e^s - 1) = 1/2 - s/12 + s^3/720 - ...

    (the Bernoulli-number expansion of s / (e^s - 1)).
    """
    s = np.log(np.asarray(x, dtype=float))
    series = 0.5 - s / 12 + s**3 / 720
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(np.abs(s) < _SERIES_LIMIT, series, 1 / s - 1 / np.expm1(s))


def legomena_shares(x: float, k: ArrayLike) -> np.ndarray:
    """E_k(x) / W for the frequencies k (any shape), by adaptive quadrature (module docstring).

    Pages ask for the same few (x, k) again and again (the same corpus at the same sizes): the results of
    the last ``_SHARES_CACHED`` are kept.
    """
    k = np.asarray(k, dtype=float)
    return _legomena_shares(float(x), tuple(k.ravel().tolist())).reshape(k.shape)


@lru_cache(maxsize=_SHARES_CACHED)
def _legomena_shares(x: float, frequencies: tuple[float, ...]) -> np.ndarray:
    k = np.array(frequencies)
    if x < _TINY_X:
        # x -> 0: E_1 / W = x (x - 1 - ln x) / (x - 1)^2 and E_k / W = x / (k (k-1)) + O(x^2 ln x) for k >= 2
        # (the leading term of the binomial series); here x is below double resolution next to 1, where the
        # quadrature's breakpoint 1 / (1 + x) would sit on the end of the interval.
        hapax = x * (x - 1 - math.log(x)) / (x - 1) ** 2
        with np.errstate(divide="ignore"):
            shares = np.where(k == 1, hapax, x / (k * (k - 1)))
        shares.flags.writeable = False  # shared by every caller of the cache
        return shares

    def integrand(w: float) -> np.ndarray:
        return x * w * (1 - w) ** (k - 1) / (x * w + 1 - w)

    from scipy.integrate import quad_vec  # imported on first use: a server starts without it

    value, _ = quad_vec(integrand, 0.0, 1.0, points=(1 / (1 + x),), epsabs=0.0, epsrel=1e-10, norm="max")
    shares = np.array(value, dtype=float)
    shares.flags.writeable = False  # shared by every caller of the cache
    return shares


def solve_zipf_fraction(hapax_ratio: float) -> float:
    """x with h(x) = V_1 / V, by Brent's method on s = ln x.

    As h ~ 1/s for large s and 1 + 1/s for very negative s, the bracket [-2/(1-r) - 1, 2/r + 1] holds r;
    it is cut to |s| <= 700 so that x stays a finite double (0.0015 < V_1 / V < 0.9985).
    """
    if not 0 < hapax_ratio < 1:
        raise ValueError("the perfect-Zipf fit needs 0 < V_1 < V")
    lo, hi = max(-2 / (1 - hapax_ratio) - 1, -_LOG_X_LIMIT), min(2 / hapax_ratio + 1, _LOG_X_LIMIT)

    def gap(s: float) -> float:
        return float(hapax_share(math.exp(s))) - hapax_ratio

    if gap(lo) < 0 or gap(hi) > 0:
        raise ValueError(f"a hapax share of {hapax_ratio} is beyond the perfect-Zipf model's range")
    from scipy.optimize import brentq  # imported on first use

    return math.exp(brentq(gap, lo, hi, xtol=1e-14))


def perfect_zipf_params(tokens: int, types: int, hapaxes: int | None = None) -> Params:
    """Z = N / x and W = V / (x ln x / (x - 1)), x from h(x) = V_1 / V, or x = 1 without V_1."""
    if tokens <= 0 or types <= 0:
        raise ValueError("the perfect-Zipf model needs tokens and types")
    x = 1.0 if hapaxes is None else solve_zipf_fraction(hapaxes / types)
    return {"zipf_size": tokens / x, "zipf_types": types / float(growth_factor(x))}


class PerfectZipf(VocabularyModel):
    """The corpus as a random sample of a perfectly Zipfian one of Z tokens and W types (module docstring).

    Fitted in closed form from N, V and V_1 (not by the shared cost), so it reproduces V and V_1.
    """

    name = "perfect_zipf"
    title = "perfect Zipf"
    formula = "E[V(n)] = W x ln x / (x - 1), x = n / Z, with Z = zipf_size and W = zipf_types"
    parameter_names = ("zipf_size", "zipf_types")
    parameter_meanings = {
        "zipf_size": "Z: the token count at which the corpus is perfectly Zipfian (V_m = W / (m (m + 1)))",
        "zipf_types": "W: the number of types at that size",
    }
    bounds = {"zipf_size": (0.0, np.inf), "zipf_types": (0.0, np.inf)}  # used by the minimum chi-square

    def derived_problem(self, params: Mapping[str, float], tokens: int) -> str | None:
        """At the Zipf size Z the corpus holds W / 2 hapax legomena (V_1 = W / (1 x 2)), one token each, so
        Z >= W / 2. A smaller Z (a hapax share near 0, as in a saturated vocabulary, sends Z towards 0) is
        a corpus with fewer tokens than its own hapax legomena."""
        size, types = params["zipf_size"], params["zipf_types"]
        if size < types / 2:
            return (
                f"its Zipf size of {size:.3g} tokens is smaller than the {types / 2:,.1f} hapax legomena its "
                "own spectrum holds at that size"
            )
        return None

    def expected_types(self, n: ArrayLike, params: Mapping[str, float]) -> ArrayLike:
        return as_output(
            params["zipf_types"] * growth_factor(np.asarray(n, dtype=float) / params["zipf_size"]), n
        )

    def expected_spectrum(self, n: ArrayLike, m: ArrayLike, params: Mapping[str, float]) -> np.ndarray:
        n_arr, m_arr = np.broadcast_arrays(np.asarray(n, dtype=float), np.asarray(m, dtype=float))
        out = np.empty(n_arr.shape)
        for size in np.unique(n_arr):
            here = n_arr == size
            out[here] = params["zipf_types"] * legomena_shares(size / params["zipf_size"], m_arr[here])
        return out

    def fit(
        self, spectrum: Spectrum, m_max: int = 15, near: Mapping[str, float] | None = None
    ) -> FittedModel:
        # closed form: ``near``, the start of a least-squares fit, has no use here
        params = perfect_zipf_params(spectrum.tokens, spectrum.types, spectrum.hapaxes)
        return FittedModel(self, params, spectrum.tokens, spectrum, m_max)


class PerfectZipfTotals(PerfectZipf):
    """Perfect Zipf from the totals N and V alone: assumes the corpus is perfectly Zipfian at its own size
    (x = 1, Z = N, W = V), so E_k(N) = V / (k (k+1)) and hapaxes are half of the types, whatever the text.
    Its goodness of fit is that of the perfect-Zipf family (the same minimum chi-square)."""

    name = "perfect_zipf_totals"
    title = "perfect Zipf from totals (assumes x = 1)"
    reads_spectrum = False

    def fit(
        self, spectrum: Spectrum, m_max: int = 15, near: Mapping[str, float] | None = None
    ) -> FittedModel:
        return FittedModel(
            self, perfect_zipf_params(spectrum.tokens, spectrum.types), spectrum.tokens, spectrum, m_max
        )


def fit_from_totals(tokens: int, types: int, hapaxes: int | None = None) -> FittedModel:
    """The perfect-Zipf model from published totals (N, V and optionally V_1), with no spectrum to test."""
    model = PerfectZipf() if hapaxes is not None else PerfectZipfTotals()
    return FittedModel(model, perfect_zipf_params(tokens, types, hapaxes), tokens)
