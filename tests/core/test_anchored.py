"""Predictions on both sides of the corpus size, and the coherence check."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from app.core.anchored import Anchored, incoherence
from app.core.models import MODELS
from app.core.spectrum import Spectrum

CORPUS = Spectrum.from_pairs([(1, 900), (2, 260), (3, 120), (5, 60), (9, 30), (40, 8), (300, 2)])


def test_interpolation_at_or_below_the_corpus_size_is_the_hypergeometric_expectation():
    # Reference: scipy.stats.hypergeom, E[V(n)] = sum_i (1 - pmf(0; N, f_i, n)), E[V_1(n)] = sum_i pmf(1; ...).
    anchored = Anchored(MODELS["perfect_zipf"].fit(CORPUS), CORPUS)
    N = CORPUS.tokens
    f = np.repeat(CORPUS.m, CORPUS.vm)
    for n in (10, N // 3, N):
        assert anchored.types(n) == pytest.approx(np.sum(1 - stats.hypergeom.pmf(0, N, f, n)), rel=1e-9)
        assert anchored.spectrum(n, 1)[0] == pytest.approx(np.sum(stats.hypergeom.pmf(1, N, f, n)), rel=1e-9)
    # between whole sizes the curve is linear (continuous and increasing, so planning can invert it)
    half = anchored.types(100.5)
    assert half == pytest.approx((anchored.types(100) + anchored.types(101)) / 2, rel=1e-12)


@pytest.mark.parametrize("name", ["sichel", "bounded_power_law", "population_spectrum"])
def test_beyond_the_corpus_size_the_model_is_anchored_at_the_observed_types(name):
    fitted = MODELS[name].fit(CORPUS)
    anchored = Anchored(fitted, CORPUS)
    N = CORPUS.tokens
    scale = CORPUS.types / fitted.types(N)
    assert anchored.types(N) == pytest.approx(CORPUS.types, rel=1e-12)
    assert anchored.types(N + 1e-6 * N) == pytest.approx(CORPUS.types, rel=1e-5)  # no jump at N
    assert anchored.types(10 * N) == pytest.approx(fitted.types(10 * N) * scale, rel=1e-12)
    np.testing.assert_allclose(anchored.spectrum(10 * N, 5), fitted.spectrum(10 * N, 5) * scale, rtol=1e-12)


def test_incoherent_predictions_are_named():
    assert incoherence(100.0, np.array([50.0, 20.0, 10.0])) is None
    assert "V_1" in incoherence(100.0, np.array([120.0, 1.0]))
    assert "V_1 + ... + V_3" in incoherence(100.0, np.array([60.0, 30.0, 20.0]))
    assert "negative" in incoherence(100.0, np.array([-1.0]))
    assert "negative" in incoherence(float("nan"), np.array([1.0]))
