"""Random samples of a uniform corpus, and any corpus seen as a mixture of uniform ones.

A uniform corpus has k types that each occur r times (N = k r tokens). Drawing n tokens at random
without replacement, a type is missed with the hypergeometric probability C(kr - r, n) / C(kr, n), so

    E[V(n)] = k (1 - C(kr - r, n) / C(kr, n)).

Step by step: with y types seen after n draws, the k - y unseen types still own (k - y) r of the
kr - n tokens left, so the next draw is new with probability (k - y) r / (kr - n). The step is linear
in y, hence it holds for the expectation too:

    E[V(n+1)] = E[V(n)] + (k - E[V(n)]) r / (kr - n),    E[V(0)] = 0.

Treating n as continuous, dy/dn = r (k - y) / (kr - n) gives the closed form
E[V(n)] ~ k (1 - (1 - n / (kr))^r).

Grouping the types of any corpus by frequency gives uniform sub-corpora of V_m types x m tokens; a
random fraction p of the text takes about p m V_m tokens of group m, so the closed form summed over the
groups is E(p) = sum_m V_m (1 - (1-p)^m), the binomial interpolation (Baayen 2001, ch. 2). Its
derivatives give the m-legomena of the sample: E[V_k(p)] = (-1)^(k+1) p^k / k! d^k E / dp^k.
"""

from __future__ import annotations

import numpy as np
from scipy.special import gammaln, xlog1py

from app.core.interpolation import expected_types
from app.core.spectrum import Spectrum


def _uniform_spectrum(k: int, r: int) -> Spectrum:
    return Spectrum(np.array([r]), np.array([k]))


def uniform_expected_types_exact(k: int, r: int, n: int) -> float:
    """Exact E[V(n)] = k (1 - C(kr - r, n) / C(kr, n)) for a uniform corpus (hypergeometric).

    Computed by the log-gamma interpolation of ``app.core.interpolation`` on the spectrum V_r = k.
    """
    return expected_types(_uniform_spectrum(k, r), n)


def uniform_expected_types_recursion(k: int, r: int, n: int) -> np.ndarray:
    """E[V(j)] for j = 0..n by the recursion E[V(j+1)] = E[V(j)] + (k - E[V(j)]) r / (kr - j).

    The recursion is unrolled without a Python loop: k - E[V(j+1)] = (k - E[V(j)]) (1 - r / (kr - j)),
    so k - E[V(j)] = k prod_{i<j} (1 - r / (kr - i)), a cumulative product in float64.
    """
    if not 0 <= n <= k * r:
        raise ValueError(f"sample size {n} must lie between 0 and the corpus size {k * r}")
    i = np.arange(n, dtype=float)
    unseen_share = np.concatenate(([1.0], np.cumprod(1.0 - r / (k * r - i))))
    return k * (1.0 - unseen_share)


def uniform_expected_types_closed_form(
    k: float | np.ndarray, r: float | np.ndarray, n: float | np.ndarray
) -> float | np.ndarray:
    """Continuous approximation E[V(n)] ~ k (1 - (1 - n / (kr))^r); broadcasts over arrays."""
    k = np.asarray(k, dtype=float)
    r = np.asarray(r, dtype=float)
    frac = np.asarray(n, dtype=float) / (k * r)
    with np.errstate(divide="ignore"):
        out = -k * np.expm1(r * np.log1p(-frac))
    return float(out) if out.ndim == 0 else out


def mixture_expected_types(spectrum: Spectrum, p: float) -> float:
    """E(p) = sum_m V_m (1 - (1-p)^m): each frequency group m is a uniform sub-corpus of V_m types x m
    tokens, sampled at the same fraction p (the uniform closed form summed over the groups)."""
    if not 0 <= p <= 1:
        raise ValueError("sampling fraction p must lie in [0, 1]")
    groups = uniform_expected_types_closed_form(spectrum.vm, spectrum.m, p * spectrum.m * spectrum.vm)
    return float(np.sum(groups))


def growth_derivative(spectrum: Spectrum, p: float, k: int) -> float:
    """k-th derivative of E(p) = sum_m V_m (1 - (1-p)^m), term by term (k >= 1):

    d^k E / dp^k = (-1)^(k+1) sum_{m>=k} V_m m! / (m-k)! (1-p)^(m-k).

    Each term is formed in log space, so large m and k do not overflow.
    """
    if k < 1:
        raise ValueError("derivative order k must be at least 1")
    if not 0 <= p <= 1:
        raise ValueError("sampling fraction p must lie in [0, 1]")
    keep = spectrum.m >= k
    m = spectrum.m[keep].astype(float)
    # xlog1py(0, -1) = 0 keeps (1-p)^0 = 1 at p = 1
    log_term = np.log(spectrum.vm[keep]) + gammaln(m + 1) - gammaln(m - k + 1) + xlog1py(m - k, -p)
    return float((-1) ** (k + 1) * np.exp(log_term).sum())


def legomena_from_growth_derivative(spectrum: Spectrum, p: float, k: int) -> float:
    """E[V_k(p)] = (-1)^(k+1) p^k / k! d^k E / dp^k, the k-legomena expected in a sample of fraction p.

    A type seen j times in the text is seen exactly k times in the sample with the binomial probability
    C(j, k) p^k (1-p)^(j-k); differentiating E(p) k times recovers exactly that sum (Baayen 2001, ch. 2).
    """
    return float((-1) ** (k + 1) * p**k * np.exp(-gammaln(k + 1)) * growth_derivative(spectrum, p, k))
