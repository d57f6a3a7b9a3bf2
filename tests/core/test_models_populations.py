"""Population models (Zipf-Mandelbrot, finite Zipf-Mandelbrot, GIGP): closed forms, fitting, covariances."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from app.core.models import MODELS
from app.core.models.goodness import poisson_covariance
from tests.core.population_samples import (
    expected_count_by_quad,
    expected_types_by_quad,
    gigp_density,
    integrate_log,
    poisson_sample,
    power_law_density,
    stratified_population,
)

# (model name, parameters, density written from its definition, integration range)
CASES = [
    (
        "power_law",
        {"exponent": 0.6, "max_probability": 0.02},
        power_law_density(0.6, 0.0, 0.02),
        (1e-35, 0.02),
    ),
    (
        "bounded_power_law",
        {"exponent": 0.7, "min_probability": 1e-6, "max_probability": 0.02},
        power_law_density(0.7, 1e-6, 0.02),
        (1e-6, 0.02),
    ),
    (
        "sichel",
        {"rare_cutoff": 0.02, "frequent_scale": 0.01, "shape": -0.6},
        gigp_density(0.02, 0.01, -0.6),
        (1e-26, 2.0),
    ),
]
SIZES = [10.0, 1e3, 1e5, 1e7, 1e9]


@pytest.mark.parametrize(("name", "params", "density", "support"), CASES, ids=[c[0] for c in CASES])
def test_density_is_normalised(name, params, density, support):
    # Definition of a type density (Baayen 2001, ch. 2): integral pi g(pi) dpi = 1; checked by
    # scipy.integrate.quad, independently of the model's formulas.
    assert integrate_log(lambda p: p * density(p), *support, 1.0) == pytest.approx(1.0, rel=1e-8)


@pytest.mark.parametrize(("name", "params", "density", "support"), CASES, ids=[c[0] for c in CASES])
@pytest.mark.parametrize("n", SIZES)
def test_expected_types_equals_quadrature(name, params, density, support, n):
    # Definition (Baayen 2001, ch. 2) E[V(N)] = int (1 - e^{-N pi}) g(pi) dpi by scipy.integrate.quad.
    reference = expected_types_by_quad(density, *support, n)
    assert MODELS[name].expected_types(n, params) == pytest.approx(reference, rel=1e-9)


@pytest.mark.parametrize(("name", "params", "density", "support"), CASES, ids=[c[0] for c in CASES])
@pytest.mark.parametrize("n", SIZES)
def test_expected_spectrum_equals_quadrature(name, params, density, support, n):
    # Definition (Baayen 2001, ch. 2) E[V_m(N)] = int e^{-N pi} (N pi)^m / m! g(pi) dpi by scipy.integrate.quad.
    m = np.array([1, 2, 3, 7, 15, 30])
    reference = np.array([expected_count_by_quad(density, *support, n, int(k)) for k in m])
    model = MODELS[name].expected_spectrum(n, m, params)
    np.testing.assert_allclose(model, reference, rtol=1e-8, atol=1e-9 * max(reference.max(), 1e-300))


def test_gigp_population_matches_scipy_geninvgauss():
    # The GIGP type density divided by its population size S is the generalised inverse Gaussian
    # distribution: scipy.stats.geninvgauss(p=g, b=b, scale=b c / 2) (substitute pi = (b c / 2) x in the
    # density). S is the limit of E[V(n)] as n grows.
    b, c, g = 0.02, 0.01, -0.6
    population = MODELS["sichel"].expected_types(1e15, {"rare_cutoff": b, "frequent_scale": c, "shape": g})
    pi = np.geomspace(1e-8, 0.05, 9)
    np.testing.assert_allclose(
        gigp_density(b, c, g)(pi) / population, stats.geninvgauss(g, b, scale=b * c / 2).pdf(pi), rtol=1e-8
    )


def test_zipf_mandelbrot_grows_without_bound_and_finite_model_saturates():
    # Evert (2004): the ZM population is infinite (V ~ n^a), the fZM population has S = C (A^-a - B^-a) / a types.
    zm, fzm = MODELS["power_law"], MODELS["bounded_power_law"]
    a, A, B = 0.7, 1e-6, 0.02
    C = (1 - a) / (B ** (1 - a) - A ** (1 - a))
    assert fzm.expected_types(
        1e12, {"exponent": a, "min_probability": A, "max_probability": B}
    ) == pytest.approx(C * (A**-a - B**-a) / a, rel=1e-12)
    ratio = zm.expected_types(1e12, {"exponent": a, "max_probability": B}) / zm.expected_types(
        1e11, {"exponent": a, "max_probability": B}
    )
    assert ratio == pytest.approx(10**a, rel=1e-3)


# Populations for the simulation tests, with the relative tolerance of each recovered parameter and of the
# prediction at 10 N: about four standard deviations of the estimates over 20 simulated samples of
# N = 4e6 tokens (measured while writing these tests). B, the largest type probability, is weakly
# identified by V_1..V_15 in the Zipf-Mandelbrot family. Truncating Zipf-Mandelbrot at 1e-14 drops types
# that would receive N (1e-14 / B)^(1-a) ~ 0.004 tokens at N = 4e6.
POPULATIONS = {
    "power_law": (
        {"exponent": 0.3, "max_probability": 0.05},
        power_law_density(0.3, 0.0, 0.05),
        (1e-14, 0.05),
        {"exponent": 0.1, "max_probability": 0.3, "prediction": 0.08},
    ),
    "bounded_power_law": (
        {"exponent": 0.7, "min_probability": 2e-7, "max_probability": 0.02},
        power_law_density(0.7, 2e-7, 0.02),
        (2e-7, 0.02),
        {"exponent": 0.04, "min_probability": 0.05, "max_probability": 0.6, "prediction": 0.012},
    ),
    "sichel": (
        {"rare_cutoff": 0.02, "frequent_scale": 0.01, "shape": -0.6},
        gigp_density(0.02, 0.01, -0.6),
        (1e-12, 1.0),
        {"rare_cutoff": 0.16, "frequent_scale": 0.4, "shape": 0.06, "prediction": 0.005},
    ),
}
FIT_SIZE = 4e6


@pytest.mark.parametrize("name", list(POPULATIONS))
def test_fit_recovers_parameters_of_a_simulated_sample(name):
    # Simulation: a finite population drawn from the density, counts ~ Poisson(N pi); the fit must recover
    # the parameters and the model's prediction at 10 N.
    params, density, support, tolerance = POPULATIONS[name]
    sample = poisson_sample(stratified_population(density, *support), FIT_SIZE, np.random.default_rng(11))
    fitted = MODELS[name].fit(sample)
    for key, value in params.items():
        assert fitted.params[key] == pytest.approx(value, rel=tolerance[key]), key
    truth = MODELS[name].expected_types(10 * FIT_SIZE, params)
    assert fitted.types(10 * FIT_SIZE) == pytest.approx(truth, rel=tolerance["prediction"])


@pytest.mark.parametrize("name", list(POPULATIONS))
def test_minimum_chi_square_is_calibrated_on_samples_from_the_model(name):
    # For samples from the model, the minimum chi-square follows chi-square with M + 1 - k df (Cramer 1946,
    # from memory): over 40 samples the mean statistic is df within 4 standard errors sqrt(2 df / 40).
    params, density, support, _ = POPULATIONS[name]
    pi = stratified_population(density, *support)
    rng = np.random.default_rng(2)
    fits = [MODELS[name].fit(poisson_sample(pi, 2e5, rng)).goodness_of_fit for _ in range(40)]
    df = fits[0].df
    assert df == 16 - len(params)
    assert abs(np.mean([f.statistic for f in fits]) - df) < 4 * np.sqrt(2 * df / 40)


def test_chi_square_rejects_the_wrong_model():
    # A finite population is not an infinite Zipf-Mandelbrot one: the chi-square must say so.
    _, density, support, _ = POPULATIONS["bounded_power_law"]
    sample = poisson_sample(stratified_population(density, *support), FIT_SIZE, np.random.default_rng(5))
    assert MODELS["power_law"].fit(sample).goodness_of_fit.p_value < 1e-6


COVARIANCE_CASES = {
    "bounded_power_law": (
        {"exponent": 0.7, "min_probability": 2e-6, "max_probability": 0.02},
        power_law_density(0.7, 2e-6, 0.02),
        (2e-6, 0.02),
    ),
    "sichel": POPULATIONS["sichel"][:3],
}


@pytest.mark.parametrize("name", list(COVARIANCE_CASES))
def test_covariances_agree_with_500_simulated_samples(name):
    # Baayen (2001) covariances of (V, V_1..V_M) against the covariance of 500 Poisson samples from one
    # population. The standard error of a sample covariance of (near) normal variables is
    # sqrt((s_ii s_jj + s_ij^2) / (n - 1)) (Anderson 2003, from memory); |z| < 4.5 over 136 entries.
    params, density, support = COVARIANCE_CASES[name]
    pi = stratified_population(density, *support)
    n, m_max, draws = 2e4, 15, 500
    rng = np.random.default_rng(3)
    rows = []
    for _ in range(draws):
        counts = rng.poisson(n * pi)
        counts = counts[counts > 0]
        rows.append(np.concatenate(([counts.size], np.bincount(counts, minlength=m_max + 1)[1 : m_max + 1])))
    rows = np.array(rows, dtype=float)
    theory = poisson_covariance(MODELS[name], params, n, m_max)
    empirical = np.cov(rows.T)
    se = np.sqrt((np.outer(np.diag(theory), np.diag(theory)) + theory**2) / (draws - 1))
    assert np.max(np.abs(empirical - theory) / se) < 4.5
    # With the true expectations, X^2 = d' S^-1 d is chi-square with M + 1 df: its mean over 500 draws
    # is M + 1 within about 6 standard errors sqrt(2 (M + 1) / 500) (scipy.stats.chi2 moments).
    model = MODELS[name]
    expected = np.concatenate(
        ([model.expected_types(n, params)], model.expected_spectrum(n, np.arange(1, m_max + 1), params))
    )
    d = rows - expected
    x2 = np.einsum("ij,jk,ik->i", d, np.linalg.inv(theory), d)
    mean, var = stats.chi2.stats(m_max + 1, moments="mv")
    assert abs(x2.mean() - mean) < 6 * np.sqrt(var / draws)
