"""Uniform corpora and the mixture view of the growth curve, against scipy.stats.hypergeom, simulation,
the binomial interpolation and numerical differentiation."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import hypergeom

from app.core.interpolation import expected_spectrum_binomial, expected_types_binomial
from app.core.spectrum import Spectrum
from app.core.uniform import (
    growth_derivative,
    legomena_from_growth_derivative,
    mixture_expected_types,
    uniform_expected_types_closed_form,
    uniform_expected_types_exact,
    uniform_expected_types_recursion,
)

SHAPES = [(1, 1), (1, 7), (12, 1), (50, 20), (200, 5), (1000, 3)]


def hypergeom_uniform(k: int, r: int, n: np.ndarray) -> np.ndarray:
    # reference: scipy.stats.hypergeom, each of the k types (r tokens of k r) is missed with pmf(0; kr, r, n)
    return k * (1 - hypergeom.pmf(0, k * r, r, n))


@pytest.mark.parametrize(("k", "r"), SHAPES)
def test_recursion_equals_hypergeometric_exact(k: int, r: int) -> None:
    n = np.arange(k * r + 1)
    np.testing.assert_allclose(uniform_expected_types_recursion(k, r, k * r), hypergeom_uniform(k, r, n),
                               rtol=1e-10, atol=1e-10)  # fmt: skip


@pytest.mark.parametrize(("k", "r"), SHAPES)
def test_exact_equals_hypergeometric(k: int, r: int) -> None:
    # log-gamma differences keep about eps * N ln N absolute precision in log C(N-r, n)/C(N, n), which k
    # multiplies: ~1e-8 relative at N = 3000, n = 1
    for n in {0, 1, k * r // 3, k * r - 1, k * r}:
        assert uniform_expected_types_exact(k, r, n) == pytest.approx(hypergeom_uniform(k, r, n), rel=1e-7)


@pytest.mark.parametrize(("k", "r"), [(50, 20), (200, 5), (1000, 3), (500, 10), (50, 2)])
def test_closed_form_within_one_percent_for_fifty_types_or_more(k: int, r: int) -> None:
    # where the closed form holds: for k >= 50 types it is within 1% of the exact value at every n >= 1;
    # the worst case is n = 1, where it gives k (1 - (1 - 1/(kr))^r) ~ 1 - (r - 1) / (2 k r) > 1 - 1/(2k)
    n = np.arange(1, k * r + 1)
    exact = hypergeom_uniform(k, r, n)
    relative = np.abs(uniform_expected_types_closed_form(k, r, n) / exact - 1)
    assert relative.max() < 0.01
    assert relative.max() <= 1 / (2 * k)
    assert relative.argmax() == 0


def test_closed_form_misses_one_percent_for_few_types() -> None:
    # the 1% statement needs enough types: with k = 10, r = 10 the error at n = 1 is about 4.5%
    assert abs(uniform_expected_types_closed_form(10, 10, 1) - 1) > 0.04


def test_simulated_draws_agree_with_recursion() -> None:
    # simulation: 600 random orders of a uniform corpus; the mean type count after n draws must lie within
    # 3 standard errors of the recursion
    rng = np.random.default_rng(5)
    k, r, reps = 80, 6, 600
    tokens = np.repeat(np.arange(k), r)
    curves = np.empty((reps, k * r + 1))
    for i in range(reps):
        order = rng.permutation(tokens)
        first = np.zeros(k * r, dtype=np.int64)
        first[np.unique(order, return_index=True)[1]] = 1
        curves[i] = np.concatenate(([0], np.cumsum(first)))
    expected = uniform_expected_types_recursion(k, r, k * r)
    for n in (5, 40, 120, 240, 400):
        se = curves[:, n].std(ddof=1) / math.sqrt(reps)
        assert abs(curves[:, n].mean() - expected[n]) < 3 * se


@pytest.fixture(scope="module")
def zipf_spectrum() -> Spectrum:
    return Spectrum.from_frequencies(np.random.default_rng(3).zipf(1.6, 4000))


@pytest.mark.parametrize("p", [0.0, 0.01, 0.2, 0.5, 0.9, 1.0])
def test_mixture_of_uniform_corpora_is_the_binomial_interpolation(zipf_spectrum: Spectrum, p: float) -> None:
    # reference: binomial E[V(n)] = sum_m V_m (1 - (1-p)^m), p = n / N (Baayen 2001, ch. 2)
    binomial = expected_types_binomial(zipf_spectrum, p * zipf_spectrum.tokens)
    assert mixture_expected_types(zipf_spectrum, p) == pytest.approx(binomial, rel=1e-12)


@pytest.mark.parametrize("p", [0.05, 0.3, 0.7, 1.0])
def test_legomena_from_derivative_equal_binomial_sum(zipf_spectrum: Spectrum, p: float) -> None:
    # reference: E[V_k(p)] = sum_{m>=k} V_m C(m, k) p^k (1-p)^(m-k), the direct binomial sum
    direct = expected_spectrum_binomial(zipf_spectrum, p * zipf_spectrum.tokens, 8)
    derived = [legomena_from_growth_derivative(zipf_spectrum, p, k) for k in range(1, 9)]
    np.testing.assert_allclose(derived, direct, rtol=1e-9, atol=1e-12)


SMALL = Spectrum.from_pairs([(1, 40), (2, 15), (3, 9), (5, 4), (8, 2), (13, 1), (30, 1)])


def growth_curve(p: complex) -> complex:
    """E(p) = sum_m V_m (1 - (1-p)^m) evaluated straight from the definition, also for complex p."""
    return sum(int(v) * (1 - (1 - p) ** int(m)) for m, v in zip(SMALL.m, SMALL.vm, strict=True))


def test_first_derivative_matches_complex_step() -> None:
    # independent check: complex-step differentiation f'(p) = Im f(p + ih) / h (Squire & Trapp 1998)
    h = 1e-20
    for p in (0.1, 0.4, 0.8):
        assert growth_derivative(SMALL, p, 1) == pytest.approx(growth_curve(p + 1j * h).imag / h, rel=1e-12)


def test_second_derivative_matches_central_difference() -> None:
    # independent check: central difference f''(p) ~ (f(p+h) - 2 f(p) + f(p-h)) / h^2, error O(h^2)
    h = 1e-4
    for p in (0.2, 0.5):
        numeric = (growth_curve(p + h) - 2 * growth_curve(p) + growth_curve(p - h)) / h**2
        assert growth_derivative(SMALL, p, 2) == pytest.approx(numeric, rel=1e-5)


@pytest.mark.parametrize("k", [1, 2, 3, 5, 8])
def test_higher_derivatives_match_cauchy_integral(k: int) -> None:
    # independent check: Cauchy's integral formula on a circle of radius rho, trapezoidal rule with M
    # points (Lyness & Moler 1967): f^(k)(p) ~ k! / (M rho^k) sum_j f(p + rho w_j) w_j^-k,
    # w_j = e^(2 pi i j / M); exact up to rounding for a polynomial of degree < M + k (here degree 30)
    rho, points = 0.2, 64
    for p in (0.15, 0.6):
        w = np.exp(2j * np.pi * np.arange(points) / points)
        values = np.array([growth_curve(p + rho * wj) for wj in w])
        numeric = (math.factorial(k) / (points * rho**k) * np.sum(values * w ** (-k))).real
        assert growth_derivative(SMALL, p, k) == pytest.approx(numeric, rel=1e-8)


def test_dis_legomenon_becomes_hapax_with_probability_2p_1_minus_p() -> None:
    # worked example (Baayen 2001, ch. 2): one type seen twice is a hapax of a p-sample with chance 2p(1-p)
    one_dis = Spectrum.from_pairs([(2, 1)])
    for p in (0.1, 0.5, 0.75):
        assert legomena_from_growth_derivative(one_dis, p, 1) == pytest.approx(2 * p * (1 - p), rel=1e-12)
