"""Heaps' law: the log-log fit and the legomena derived from it."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.special import binom

from app.core.interpolation import expected_types
from app.core.models import MODELS
from app.core.models.heaps import fit_power_law
from app.core.spectrum import Spectrum

HEAPS = MODELS["heaps"]


def test_recovers_k_and_beta_on_an_exact_power_law():
    # Heaps (1978): V = K N^beta; on an exact curve least squares in log-log must return K and beta.
    sizes = np.geomspace(1_000, 10_000, 12)
    K, beta = fit_power_law(sizes, 7.3 * sizes**0.61)
    assert K == pytest.approx(7.3, rel=1e-10)
    assert beta == pytest.approx(0.61, rel=1e-12)


def test_fit_is_least_squares_on_the_upper_decade_of_the_exact_curve():
    # Reference: scipy.stats.linregress of log E[V(n)] on log n, n in [N/10, N], with E[V(n)] the exact
    # hypergeometric interpolation of the spectrum.
    spectrum = Spectrum.from_pairs([(1, 3000), (2, 900), (3, 420), (5, 200), (9, 90), (30, 25), (400, 4)])
    N = spectrum.tokens
    sizes = np.unique(np.geomspace(N / 10, N, 12).round().astype(int))
    reference = stats.linregress(np.log(sizes), np.log([expected_types(spectrum, int(n)) for n in sizes]))
    fitted = HEAPS.fit(spectrum)
    assert fitted.params["exponent"] == pytest.approx(reference.slope, rel=1e-10)
    assert fitted.params["scale"] == pytest.approx(np.exp(reference.intercept), rel=1e-10)


@pytest.mark.parametrize("beta", [0.3, 0.55, 0.8])
def test_legomena_follow_the_growth_identity(beta):
    # E[V_k(n)] = (-1)^(k+1) n^k / k! d^k (K n^beta) / dn^k = K n^beta (-1)^(k+1) C(beta, k), with the
    # generalised binomial coefficient from scipy.special.binom. The first K shares sum to
    # 1 - (-1)^K C(beta - 1, K) (alternating partial sums of binomial coefficients; Graham, Knuth & Patashnik,
    # Concrete Mathematics, eq. 5.16, from memory), which tends to 1.
    params = {"scale": 12.0, "exponent": beta}
    k = np.arange(1, 21)
    n = 5e4
    expected = 12.0 * n**beta * (-1.0) ** (k + 1) * binom(beta, k)
    np.testing.assert_allclose(HEAPS.expected_spectrum(n, k, params), expected, rtol=1e-10)
    K = 1000
    shares = HEAPS.expected_spectrum(n, np.arange(1, K + 1), params) / HEAPS.expected_types(n, params)
    assert shares[0] == pytest.approx(beta)  # the hapax share is beta: n dV/dn = beta V
    assert shares.sum() == pytest.approx(1 - (-1) ** K * binom(beta - 1, K), rel=1e-10)


def test_goodness_of_fit_is_declared_unavailable():
    fitted = HEAPS.fit(Spectrum.from_pairs([(1, 50), (2, 20), (3, 9), (8, 4)]))
    assert fitted.goodness_of_fit.statistic is None
    assert "growth curve" in fitted.goodness_of_fit.reason
