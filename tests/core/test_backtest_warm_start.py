"""Warm-started refits (thinnings, bootstrap replicates started from the full-corpus fit) against the
reference, the cold fits from every initial guess: the recommendation must not move beyond the solver's
tolerance."""

from __future__ import annotations

import numpy as np
import pytest

from app.core.backtest import backtest
from tests.core.population_samples import poisson_sample, power_law_density, stratified_population

WEIGHT_TOLERANCE = 1e-4
"""Absolute, on weights in [0, 1]: least_squares stops at a relative cost change of 1e-8 (scipy's default
ftol), so two descents to the same minimum agree on the parameters to about 1e-4 relative at worst."""
BAND_TOLERANCE = 1e-3
"""Relative, on every width of the recommended range (backtest rms and bias, bootstrap and between-models
spreads)."""


@pytest.fixture(
    scope="module",
    params=[
        # A finite Zipf-Mandelbrot population of about 7,000 types (Evert 2004), 20,000 tokens: saturating.
        (0.5, 1e-6, 0.02, 2e4),
        # An open one (a = 0.9 down to pi = 1e-8), 15,000 tokens: a draft-sized text with many hapaxes.
        (0.9, 1e-8, 0.05, 1.5e4),
    ],
    ids=["finite", "open"],
)
def reports(request):
    a, lo, hi, tokens = request.param
    spectrum = poisson_sample(
        stratified_population(power_law_density(a, lo, hi), lo, hi), tokens, np.random.default_rng(3)
    )
    return backtest(spectrum, warm_start=False), backtest(spectrum, warm_start=True)


def test_recommended_weights_are_those_of_cold_fits(reports):
    cold, warm = reports
    assert [f.name for f in warm.recommended.members] == [f.name for f in cold.recommended.members]
    np.testing.assert_allclose(
        warm.recommended.types_weights, cold.recommended.types_weights, atol=WEIGHT_TOLERANCE
    )
    np.testing.assert_allclose(
        warm.recommended.legomena_weights, cold.recommended.legomena_weights, atol=WEIGHT_TOLERANCE
    )


def test_ranges_are_those_of_cold_fits(reports):
    cold, warm = reports
    pairs = [(cold.recommended.band, warm.recommended.band)]
    pairs += [(cold.fitted[name].band, warm.fitted[name].band) for name in cold.fitted]
    for before, after in pairs:
        assert (before is None) == (after is None)
        if before is None:
            continue
        for width in ("rms", "bias", "sampling_sd", "between_sd"):
            reference = np.array(getattr(before, width))
            np.testing.assert_allclose(getattr(after, width), reference, rtol=BAND_TOLERANCE, atol=1e-9)


def test_backtest_errors_are_those_of_cold_fits(reports):
    cold, warm = reports
    assert [(r.model, r.label, r.draw) for r in warm.runs] == [(r.model, r.label, r.draw) for r in cold.runs]
    # Signed percentage errors: 0.01 points is a relative difference of 1e-4 in the predicted types.
    np.testing.assert_allclose(
        [r.types_error for r in warm.runs], [r.types_error for r in cold.runs], atol=0.01, equal_nan=True
    )
