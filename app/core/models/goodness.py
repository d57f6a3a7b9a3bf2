"""Goodness of fit of a vocabulary model: multivariate chi-square after Baayen (2001, ch. 3).

Under Poisson sampling of N tokens the counts f_i of different types are independent, with
P(f_i = m) = e^{-N pi_i} (N pi_i)^m / m!. V_m = sum_i [f_i = m] and V = sum_i [f_i > 0] are sums of
indicators, so their covariances are sums over types of indicator covariances. Since
P(f = m) P(f = k) = C(m+k, m) / 2^(m+k) * e^{-2N pi} (2N pi)^(m+k) / (m+k)!, each sum is an expectation at 2N:

    Cov[V_m, V_k] = delta_mk E[V_m(N)] - C(m+k, m) E[V_{m+k}(2N)] / 2^(m+k)
    Cov[V, V_m]   = E[V_m(2N)] / 2^m                 (P(f = m) P(f = 0))
    Var[V]        = E[V(2N)] - E[V(N)]               (sum of P(f = 0) - P(f = 0)^2)

X^2 = d' S^-1 d with d = observed - expected over (V, V_1..V_M) follows a chi-square distribution with
M + 1 - (number of fitted parameters) degrees of freedom (scipy.stats.chi2 gives the p-value).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np
from scipy.linalg import cholesky, solve_triangular
from scipy.special import chdtrc, comb

from app.core.spectrum import Spectrum


class SpectrumLaw(Protocol):
    """What the test needs of a model: E[V(n)] and E[V_m(n)] at given parameters. Every
    ``VocabularyModel`` (``app.core.models.base``) is one; the test is written against this shape so that the
    models' base, which runs it after a fit, is the only one of the two that imports the other."""

    def expected_types(self, n: Any, params: Mapping[str, float]) -> Any: ...

    def expected_spectrum(self, n: Any, m: Any, params: Mapping[str, float]) -> np.ndarray: ...


@dataclass(frozen=True)
class GoodnessOfFit:
    """The chi-square statistic, its degrees of freedom and p-value, or the reason it is not available."""

    m_max: int
    statistic: float | None = None
    df: int | None = None
    p_value: float | None = None
    reason: str | None = None

    def as_dict(self) -> dict[str, Any]:
        return {
            "m_max": self.m_max,
            "chi_square": self.statistic,
            "df": self.df,
            "p_value": self.p_value,
            "reason": self.reason,
        }


def poisson_covariance(model: SpectrumLaw, params: Mapping[str, float], n: float, m_max: int) -> np.ndarray:
    """Covariance matrix of (V, V_1..V_M) at size n under Poisson sampling (module docstring)."""
    m = np.arange(1, m_max + 1)
    at_n = np.asarray(model.expected_spectrum(n, m, params), dtype=float)
    at_2n = np.asarray(model.expected_spectrum(2 * n, np.arange(1, 2 * m_max + 1), params), dtype=float)
    mk = m[:, None] + m[None, :]
    cov = np.empty((m_max + 1, m_max + 1))
    cov[1:, 1:] = np.diag(at_n) - comb(mk, m[:, None]) * at_2n[mk - 1] / 2.0**mk
    cov[0, 1:] = cov[1:, 0] = at_2n[:m_max] / 2.0**m
    cov[0, 0] = float(model.expected_types(2 * n, params)) - float(model.expected_types(n, params))
    return cov


def whitening(
    model: SpectrumLaw, params: Mapping[str, float], n: float, m_max: int
) -> Callable[[np.ndarray], np.ndarray] | None:
    """d -> L^-1 d for the Cholesky factor S = L L' of ``poisson_covariance``, so |L^-1 d|^2 = d' S^-1 d;
    None when S is not positive definite (or not finite)."""
    cov = poisson_covariance(model, params, n, m_max)
    if not np.all(np.isfinite(cov)):
        return None
    try:
        lower = cholesky(cov, lower=True)
    except np.linalg.LinAlgError:
        return None
    return lambda d: solve_triangular(lower, d, lower=True)


def observed_counts(spectrum: Spectrum, m_max: int) -> np.ndarray:
    """(V, V_1..V_M) of a spectrum."""
    return np.concatenate(([spectrum.types], spectrum.dense(m_max))).astype(float)


def expected_counts(model: SpectrumLaw, params: Mapping[str, float], n: float, m_max: int) -> np.ndarray:
    """(E[V(n)], E[V_1(n)]..E[V_M(n)]) of a model."""
    spectrum = model.expected_spectrum(n, np.arange(1, m_max + 1), params)
    return np.concatenate(([model.expected_types(n, params)], spectrum)).astype(float)


def chi_square(
    model: SpectrumLaw, params: Mapping[str, float], spectrum: Spectrum, m_max: int, n_fitted: int
) -> GoodnessOfFit:
    """X^2 = d' S^-1 d over (V, V_1..V_M) at the corpus size, df = M + 1 - n_fitted."""
    N = spectrum.tokens
    d = observed_counts(spectrum, m_max) - expected_counts(model, params, N, m_max)
    df = m_max + 1 - n_fitted
    whiten = whitening(model, params, N, m_max)
    if whiten is None or not np.all(np.isfinite(d)):
        return GoodnessOfFit(m_max, df=df, reason="the Poisson covariance matrix is not positive definite")
    statistic = float(np.sum(whiten(d) ** 2))
    return GoodnessOfFit(m_max, statistic, df, float(chdtrc(df, statistic)))


def spectrum_misfit(observed: np.ndarray, expected: np.ndarray, types: float) -> float:
    """An effect size beside the p-value: half the sum of |V_m - E[V_m]| over the classes m = 1..M given,
    as a share of the V observed types. It reads as the share of types that the model puts in another
    frequency class than the text does (the total variation distance between the observed and expected
    legomena profiles V_m / V when both sum alike); unlike the p-value it does not grow with the corpus."""
    if types <= 0:
        raise ValueError("the spectrum has no types")
    return float(0.5 * np.sum(np.abs(np.asarray(observed, float) - np.asarray(expected, float))) / types)
