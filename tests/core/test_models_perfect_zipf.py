"""The perfect-Zipf model: shares, closed forms, quadrature, fit."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import comb

from app.core.models import MODELS, fit_from_totals
from app.core.models.perfect_zipf import growth_factor, hapax_share, legomena_shares, solve_zipf_fraction
from app.core.spectrum import Spectrum

X_VALUES = [1e-3, 0.05, 0.3, 0.7, 1.0, 1.3, 1.9, 2.0, 5.0, 50.0, 1e3, 1e6]


def test_shares_at_zipf_size_are_lotka_fractions():
    # Zipf's second law / Lotka's law for words: V_m / V = 1 / (m (m+1)), so 1/2, 1/6, 1/12, 1/20 (fact of
    # the trade; Zipf 1949).
    np.testing.assert_allclose(legomena_shares(1.0, [1, 2, 3, 4]), [1 / 2, 1 / 6, 1 / 12, 1 / 20], rtol=1e-10)


def test_totals_only_fit_predicts_lotka_legomena():
    # From N and V alone the model assumes x = 1: E_k = V / (k (k+1)) at the corpus size.
    fitted = fit_from_totals(100_000, 12_000)
    np.testing.assert_allclose(fitted.spectrum(100_000, 4), 12_000 * np.array([1 / 2, 1 / 6, 1 / 12, 1 / 20]))
    assert fitted.types(100_000) == pytest.approx(12_000)
    assert fitted.goodness_of_fit.statistic is None and fitted.goodness_of_fit.reason


@pytest.mark.parametrize("x", X_VALUES)
def test_quadrature_equals_closed_form_for_hapaxes(x):
    # Closed form E_1(x) / W = x (x - 1 - ln x) / (x - 1)^2 (integral of the k = 1 integrand by hand).
    closed = x * (x - 1 - math.log(x)) / (x - 1) ** 2 if x != 1 else 0.5
    assert legomena_shares(x, [1])[0] == pytest.approx(closed, rel=1e-9)
    assert float(hapax_share(x)) * float(growth_factor(x)) == pytest.approx(closed, rel=1e-12)


@pytest.mark.parametrize("x", [0.05, 0.3, 0.7, 1.3, 1.6])
def test_quadrature_equals_binomial_series_below_two(x):
    # Binomial thinning of the Lotka spectrum (valid for |1 - x| < 1):
    # E_k(x) / W = sum_{j>=k} C(j, k) x^k (1-x)^(j-k) / (j (j+1)).
    j = np.arange(1, 3000, dtype=float)
    for k in (1, 2, 3, 7, 15):
        jj = j[j >= k]
        series = np.sum(comb(jj, k) * x**k * (1 - x) ** (jj - k) / (jj * (jj + 1)))
        assert legomena_shares(x, [k])[0] == pytest.approx(series, rel=1e-8), k


@pytest.mark.parametrize("x", [0.02, 0.5, 3.0, 40.0, 2000.0])
def test_quadrature_equals_the_integral_in_its_original_variable(x):
    # E_k(x) / W = int_0^1 [(1-t)/d] (t x / d)^(k-1) (x / d) dt, d = 1 - t + t x, integrated directly by
    # scipy.integrate.quad (the model integrates it after a change of variable).
    for k in (1, 2, 5, 12):
        ref, _ = quad(
            lambda t, k=k: (
                (1 - t) / (1 - t + t * x) * (t * x / (1 - t + t * x)) ** (k - 1) * x / (1 - t + t * x)
            ),
            0,
            1,
            points=[1 / (1 + x)],
            epsabs=0,
            epsrel=1e-12,
            limit=200,
        )
        assert legomena_shares(x, [k])[0] == pytest.approx(ref, rel=1e-8), k


@pytest.mark.parametrize("x", [0.01, 0.4, 1.0, 3.0, 100.0])
def test_legomena_sum_to_the_types(x):
    # sum_k E_k(x) = E(x). Truncated at K, the remainder is W int_0^1 x (1-w)^K / (x w + 1 - w) dw, which
    # lies between x / (max(x, 1) (K + 1)) and x / (min(x, 1) (K + 1)) (W = 1); exactly 1/(K+1) at x = 1.
    K = 4000
    remainder = float(growth_factor(x)) - legomena_shares(x, np.arange(1, K + 1)).sum()
    assert x / (max(x, 1) * (K + 1)) * (1 - 1e-6) <= remainder <= x / (min(x, 1) * (K + 1)) * (1 + 1e-6)


@pytest.mark.parametrize("x", [0.01, 0.2, 0.6, 0.999, 1.0])
def test_growth_factor_equals_binomial_sum(x):
    # E(x) / W = sum_m (1 - (1-x)^m) / (m (m+1)) (binomial interpolation of the Lotka spectrum). The sum is
    # cut at M = 10^6 and completed with sum_{m>M} 1/(m(m+1)) = 1/(M+1), since (1-x)^m < 1e-4000 there.
    m = np.arange(1, 1_000_001, dtype=float)
    with np.errstate(divide="ignore"):
        total = np.sum(-np.expm1(m * np.log1p(-x)) / (m * (m + 1)))
    assert float(growth_factor(x)) == pytest.approx(total + 1 / 1_000_001, rel=1e-9)


def test_hapax_share_is_continuous_where_the_series_takes_over():
    # h(e^s) = 1/s - 1/(e^s - 1) = 1/2 - s/12 + s^3/720 - ... (Bernoulli numbers); the series is used for
    # |s| < 1e-3 and must meet the direct formula (accurate to ~1e-12 at s = 2e-3).
    for s in (2e-3, -2e-3):
        direct = 1 / s - 1 / math.expm1(s)
        assert float(hapax_share(math.exp(s))) == pytest.approx(direct, abs=1e-11)
        assert float(hapax_share(math.exp(s / 4))) == pytest.approx(
            0.5 - s / 48 + (s / 4) ** 3 / 720, abs=1e-15
        )


@pytest.mark.parametrize("ratio", [0.002, 0.05, 0.3, 0.5, 0.62, 0.95, 0.998])
def test_zipf_fraction_solves_the_hapax_share(ratio):
    assert float(hapax_share(solve_zipf_fraction(ratio))) == pytest.approx(ratio, rel=1e-10)


@pytest.mark.parametrize("ratio", [0.0, 1.0, 0.9999, 0.0001])
def test_zipf_fraction_needs_some_but_not_only_hapaxes(ratio):
    # Outside (0.0015, 0.9985) the solution x = e^s has |s| > 700 and leaves the range of a double.
    with pytest.raises(ValueError):
        solve_zipf_fraction(ratio)


def test_fitted_model_reproduces_the_corpus_types_and_hapaxes():
    # The fit solves h(x) = V_1 / V and sets W so that E(x) = V: both must come back at N.
    spectrum = Spectrum.from_pairs([(1, 5200), (2, 1800), (3, 900), (4, 500), (7, 300), (40, 80), (900, 3)])
    fitted = MODELS["perfect_zipf"].fit(spectrum)
    assert fitted.types(spectrum.tokens) == pytest.approx(spectrum.types, rel=1e-10)
    assert fitted.spectrum(spectrum.tokens, 1)[0] == pytest.approx(spectrum.hapaxes, rel=1e-9)
    # Z = N / x and W = V (x - 1) / (x ln x) by definition.
    x = spectrum.tokens / fitted.params["zipf_size"]
    assert fitted.params["zipf_types"] == pytest.approx(
        spectrum.types * (x - 1) / (x * math.log(x)), rel=1e-12
    )


def test_fewer_than_half_hapaxes_means_a_smaller_zipf_size():
    # V_1 / V < 1/2 <=> x > 1 <=> Z < N (h falls through 1/2 at x = 1).
    spectrum = Spectrum.from_pairs([(1, 400), (2, 300), (3, 200), (10, 150)])
    assert MODELS["perfect_zipf"].fit(spectrum).params["zipf_size"] < spectrum.tokens


def test_predictions_far_beyond_the_corpus_are_finite_and_ordered():
    fitted = fit_from_totals(50_000, 8_000, 4_300)
    sizes = np.geomspace(10, 1e9, 30)
    types = fitted.types(sizes)
    assert np.all(np.isfinite(types)) and np.all(np.diff(types) > 0)
    legomena = fitted.spectrum(1e9, 20)
    assert np.all(np.isfinite(legomena)) and np.all(legomena > 0) and legomena.sum() < fitted.types(1e9)
