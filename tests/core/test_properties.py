"""Property tests (hypothesis) on the random-sample interpolation: for any valid spectrum and size, the
expectations are finite, non-negative, bounded by the obvious limits and monotone in the sample size."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from app.core.interpolation import (
    expected_spectrum,
    expected_types,
    expected_types_binomial,
    variance_types,
)
from app.core.models import MODELS
from app.core.spectrum import Spectrum

frequencies = st.lists(st.integers(min_value=1, max_value=400), min_size=1, max_size=300)


@st.composite
def spectrum_and_sizes(draw):
    spectrum = Spectrum.from_frequencies(draw(frequencies))
    sizes = sorted(draw(st.lists(st.integers(0, spectrum.tokens), min_size=2, max_size=6)))
    return spectrum, sizes


@given(spectrum_and_sizes())
@settings(max_examples=150, deadline=None)
def test_interpolation_is_finite_bounded_and_monotone(case):
    spectrum, sizes = case
    values = [expected_types(spectrum, n) for n in sizes]
    assert all(np.isfinite(values))
    # 0 <= E[V(n)] <= min(n, V), and E[V(n)] never falls as n grows (a larger sample holds a smaller one).
    for n, v in zip(sizes, values, strict=True):
        assert -1e-9 <= v <= min(n, spectrum.types) + 1e-9
    assert all(b >= a - 1e-9 for a, b in zip(values, values[1:], strict=False))
    for n in sizes:
        legomena = expected_spectrum(spectrum, n, 10)
        assert np.all(np.isfinite(legomena)) and np.all(legomena >= -1e-12)
        assert legomena.sum() <= expected_types(spectrum, n) + 1e-6
        assert variance_types(spectrum, n) >= 0
        assert 0 <= expected_types_binomial(spectrum, n) <= spectrum.types + 1e-9


# Every model gives finite, non-negative E[V(n)] that never falls as n grows, and E[V_k(n)] >= 0. The population
# models are mixtures of Poisson samples, so moreover E[V(n)] <= n (Baayen 2001, ch. 2: E[V(n)] = sum over
# types of 1 - e^(-n pi)); Heaps' law and the perfect-Zipf formulas are fitted curves without that bound at
# tiny n. A fit either keeps all this from 1 token to 100 N or refuses with a reason.
POISSON_MIXTURES = {"power_law", "bounded_power_law", "sichel"}
spiky_frequencies = st.lists(
    st.one_of(st.integers(1, 3), st.integers(1, 40), st.integers(100, 5000)), min_size=10, max_size=200
)


@given(spiky_frequencies)
@settings(max_examples=60, deadline=None)
def test_every_fitted_model_gives_sound_expectations_or_refuses(frequencies):
    spectrum = Spectrum.from_frequencies(frequencies)
    n = np.unique(np.rint(np.geomspace(1, 100 * spectrum.tokens, 120)))
    for model in MODELS.values():
        try:
            fitted = model.fit(spectrum)
        except ValueError:
            continue
        types = np.asarray(fitted.types(n), dtype=float)
        assert np.all(np.isfinite(types)) and np.all(types >= 0), model.name
        assert np.all(np.diff(types) >= -1e-9 * types[1:]), model.name
        if model.name in POISSON_MIXTURES:
            assert np.all(types <= n * (1 + 1e-9)), model.name
        legomena = fitted.spectrum(float(spectrum.tokens), 10)
        assert np.all(np.isfinite(legomena)) and np.all(legomena >= 0), model.name


@given(st.lists(st.integers(min_value=1, max_value=3000), min_size=40, max_size=400), st.floats(-2, 3))
@settings(max_examples=25, deadline=None)
def test_every_prediction_is_a_coherent_spectrum(frequencies, log_factor):
    """V_1 <= V and V_1 + ... + V_20 <= V at any size, for every model and the recommended ensemble (any
    spectrum satisfies it: the V_k count disjoint sets of types); a model that cannot keep it is refused by
    the service (``incoherence``) instead of shown."""
    from app.core.anchored import Anchored, incoherence
    from app.core.backtest import backtest

    spectrum = Spectrum.from_frequencies(frequencies)
    if spectrum.hapaxes in (0, spectrum.types):
        return
    report = backtest(spectrum, random_states=(1,), fractions=(0.5,))
    n = spectrum.tokens * 10.0**log_factor
    for predictor in (*report.fitted.values(), report.recommended):
        anchored = Anchored(predictor, spectrum)
        types, legomena = float(anchored.types(n)), anchored.spectrum(n, 20)
        assert incoherence(types, legomena) is None, predictor.name
        assert legomena[0] <= types * (1 + 1e-9) and legomena.sum() <= types * (1 + 1e-9)
