"""Shared model machinery: registry, parameter transforms, predictions, serialisation, error bands."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import stats

from app.core.models import MODELS, ErrorBand
from app.core.spectrum import Spectrum
from tests.core.population_samples import gigp_density, poisson_sample, stratified_population


@pytest.fixture(scope="module")
def corpus() -> Spectrum:
    # A text-like sample: 3e5 tokens from a GIGP population (Sichel 1975 parameters of the usual shape).
    pi = stratified_population(gigp_density(0.02, 0.01, -0.6), 1e-12, 1.0)
    return poisson_sample(pi, 3e5, np.random.default_rng(4))


def test_registry_holds_the_models_the_api_names():
    # The JSON contract names these models (predict?model=NAME); each registry key is the model's name.
    for name in ("perfect_zipf", "heaps", "power_law", "bounded_power_law", "sichel"):
        assert MODELS[name].name == name
    assert all(key == model.name and model.title for key, model in MODELS.items())


@pytest.mark.parametrize("name", ["power_law", "bounded_power_law", "sichel", "perfect_zipf"])
def test_parameter_transforms_round_trip(name, corpus):
    model = MODELS[name]
    params = model.fit(corpus).params
    back = model.from_unconstrained(model.to_unconstrained(params))
    for key in model.parameter_names:
        assert back[key] == pytest.approx(params[key], rel=1e-12)


@pytest.mark.parametrize("name", list(MODELS))
def test_every_model_predicts_far_beyond_the_corpus(name, corpus):
    fitted = MODELS[name].fit(corpus)
    sizes = np.geomspace(100, 1e9, 25)
    types = fitted.types(sizes)
    assert isinstance(fitted.types(1e9), float)
    assert np.all(np.isfinite(types)) and np.all(np.diff(types) >= 0)  # finite populations saturate
    for n in (1e3, corpus.tokens, 1e9):
        legomena = fitted.spectrum(n, 20)
        assert np.all(np.isfinite(legomena)) and np.all(legomena >= 0)
        assert legomena.sum() <= fitted.types(n) * (1 + 1e-9)  # the V_k are a part of V


@pytest.mark.parametrize("name", list(MODELS))
def test_fitted_models_serialise_to_json(name, corpus):
    data = json.loads(json.dumps(MODELS[name].fit(corpus).as_dict()))
    assert data["model"] == name and set(data["params"]) == set(MODELS[name].parameter_names)
    gof = data["goodness_of_fit"]
    assert (gof["chi_square"] is None) == (gof["reason"] is not None)


def test_lnre_fits_close_to_the_observed_totals(corpus):
    # The cost weighs V and V_1..V_15 by 1 / E (Pearson); a sample from GIGP is fitted by GIGP to within a
    # few Poisson standard deviations of V and V_1.
    fitted = MODELS["sichel"].fit(corpus)
    assert abs(fitted.types(corpus.tokens) - corpus.types) < 4 * math.sqrt(corpus.types)
    assert abs(fitted.spectrum(corpus.tokens, 1)[0] - corpus.hapaxes) < 4 * math.sqrt(corpus.hapaxes)


def test_fit_rejects_an_empty_spectrum():
    with pytest.raises(ValueError):
        MODELS["sichel"].fit(Spectrum.from_pairs([]))


def test_error_band_grows_with_the_extrapolation_factor():
    band = ErrorBand((2.0, 4.0, 10.0), (0.01, 0.02, 0.05))
    assert band.log_error(1.0) == 0.0
    np.testing.assert_allclose(band.log_error([2.0, 4.0, 10.0]), [0.01, 0.02, 0.05])
    # linear in log t between factors, proportional to log t beyond the last, symmetric for t < 1
    assert band.log_error(math.sqrt(8.0)) == pytest.approx(0.015)
    assert band.log_error(100.0) == pytest.approx(0.10)
    assert band.log_error(0.25) == pytest.approx(0.02)
    # never narrower farther out: a smaller RMS at 10x than at 4x is raised to the 4x one (running maximum)
    assert ErrorBand((2.0, 4.0, 10.0), (0.01, 0.04, 0.03)).log_error(10.0) == pytest.approx(0.04)
    low, high = band.limits(10.0, 1000.0)
    # Without a bootstrap: the nominal 90% range of the log error from the RMS, prediction x exp(-+ z rms);
    # z = scipy.stats.norm.ppf(0.95). Both ends stay positive however large the error.
    z = stats.norm.ppf(0.95)
    assert low == pytest.approx(1000 * math.exp(-z * 0.05))
    assert high == pytest.approx(1000 * math.exp(z * 0.05))
    wide_low, wide_high = ErrorBand((2.0,), (1.5,)).limits(100.0, 1000.0)
    assert 0 < wide_low < 1000 < wide_high < math.inf
    # With a bootstrap spread s, a backtest bias b and a between-model spread d: e = z sqrt(s^2 + b^2 + d^2),
    # each curve linear in log t.
    full = ErrorBand((2.0, 4.0, 10.0), (0.01, 0.02, 0.05), (0.0, -0.01, -0.03), (10.0, 100.0), (0.04, 0.08))
    assert full.half_width(10.0) == pytest.approx(z * math.hypot(0.04, 0.03))
    assert full.half_width(100.0) == pytest.approx(z * math.hypot(0.08, 0.06))
    assert full.half_width(4.0) == pytest.approx(z * math.hypot(0.04 * math.log(4) / math.log(10), 0.01))
    averaged = ErrorBand(
        full.factors, full.rms, full.bias, full.sampling_factors, full.sampling_sd, (10.0,), (0.02,)
    )
    assert averaged.half_width(10.0) == pytest.approx(z * math.sqrt(0.04**2 + 0.03**2 + 0.02**2))
    assert ErrorBand.from_dict(json.loads(json.dumps(averaged.as_dict()))) == averaged


def test_parameters_where_a_formula_is_undefined_are_a_breakdown_not_an_error(corpus):
    # A fit's residuals whitened by a Cholesky factor: scipy.linalg.solve_triangular refuses NaN input
    # (ValueError, its check_finite), so an expectation that is NaN at some parameters must be caught
    # before scaling; the optimiser then steps back instead of the whole model report failing.
    from app.core.models.base import _BREAKDOWN
    from app.core.models.goodness import whitening

    fitted = MODELS["power_law"].fit(corpus).params
    limit = fitted["exponent"] * 1.01

    class UndefinedBeyondALimit(type(MODELS["power_law"])):
        def expected_spectrum(self, n, m, params):
            spectrum = super().expected_spectrum(n, m, params)
            return spectrum if params["exponent"] < limit else np.full(np.shape(spectrum), np.nan)

    model = UndefinedBeyondALimit()
    whiten = whitening(model, fitted, corpus.tokens, 15)
    residuals = model._residuals(corpus, 15, lambda d, _: whiten(d))
    assert np.all(np.isfinite(residuals(model.to_unconstrained(fitted))))
    undefined = model.to_unconstrained(fitted | {"exponent": limit * 1.01})
    assert np.all(residuals(undefined) == _BREAKDOWN)
    model.goodness_of_fit(corpus, fitted)  # does not raise
