"""Richness indices against the lexicalrichness package (same token lists), the published formulas
computed from raw counts, and random samples.

Definitions compared with lexicalrichness 0.5 (its source read for this):
- logarithms are natural in both; Herdan's C does not depend on the base, Dugast's U and Maas' a^2 do;
- its Yule's K is 10^4 (sum_i f_i^2 / N^2 - 1 / N), algebraically our 10^4 (sum_m m^2 V_m - N) / N^2;
- its MATTR defaults to a 100-token window; we call it with our 50;
- its MTLD, like ours, ends a factor when the running TTR falls to the threshold or below, counts the leftover
  stretch as (1 - TTR) / (1 - threshold), averages the forward and backward measures, and counts the whole
  text as one factor when a pass finds none;
- its HD-D sums (1 - hypergeom.pmf(0; N, f_i, 42)) / 42 over types, as we do through the interpolation.
"""

from __future__ import annotations

import time
from collections import Counter

import numpy as np
import pytest
from lexicalrichness import LexicalRichness

from app.core.interpolation import expected_types
from app.core.richness import mattr, mtld, richness_at_size, richness_indices
from app.core.spectrum import Spectrum
from tests.core.test_interpolation import spectrum_of_ids, stdlib_docstring_tokens, token_ids


@pytest.fixture(scope="module", params=[600, 3000, None], ids=["600 tokens", "3000 tokens", "all"])
def tokens(request: pytest.FixtureRequest) -> list[str]:
    return list(stdlib_docstring_tokens()[: request.param])


@pytest.fixture(scope="module")
def reference(tokens: list[str]) -> LexicalRichness:
    return LexicalRichness(tokens, preprocessor=None, tokenizer=None)


def ours(tokens: list[str]):
    ids = token_ids(tuple(tokens))
    return richness_indices(spectrum_of_ids(ids), ids)


def test_ratio_indices_match_lexicalrichness(tokens: list[str], reference: LexicalRichness) -> None:
    indices = ours(tokens)
    assert indices.ttr == pytest.approx(reference.ttr, rel=1e-12)
    assert indices.guiraud_r == pytest.approx(reference.rttr, rel=1e-12)
    assert indices.herdan_c == pytest.approx(reference.Herdan, rel=1e-12)
    assert indices.dugast_u == pytest.approx(reference.Dugast, rel=1e-12)
    assert indices.maas_a2 == pytest.approx(reference.Maas, rel=1e-12)


def test_repeat_rate_indices_match_lexicalrichness(tokens: list[str], reference: LexicalRichness) -> None:
    indices = ours(tokens)
    assert indices.yule_k == pytest.approx(reference.yulek, rel=1e-10)
    assert indices.simpson_d == pytest.approx(reference.simpsond, rel=1e-10)


def test_hdd_matches_lexicalrichness(tokens: list[str], reference: LexicalRichness) -> None:
    assert ours(tokens).hd_d == pytest.approx(reference.hdd(draws=42), rel=1e-7)


def test_mattr_matches_lexicalrichness(tokens: list[str], reference: LexicalRichness) -> None:
    ids = token_ids(tuple(tokens))
    assert ours(tokens).mattr == pytest.approx(reference.mattr(window_size=50), rel=1e-12)
    for window in (1, 7, 120):
        assert mattr(ids, window) == pytest.approx(reference.mattr(window_size=window), rel=1e-12)


def test_mtld_matches_lexicalrichness(tokens: list[str], reference: LexicalRichness) -> None:
    ids = token_ids(tuple(tokens))
    assert ours(tokens).mtld == pytest.approx(reference.mtld(threshold=0.72), rel=1e-12)
    for threshold in (0.5, 0.8):
        assert mtld(ids, threshold) == pytest.approx(reference.mtld(threshold=threshold), rel=1e-12)


def test_mtld_without_any_factor_matches_lexicalrichness() -> None:
    distinct = [f"w{i}" for i in range(30)]
    ids = token_ids(tuple(distinct))
    assert mtld(ids) == pytest.approx(LexicalRichness(distinct, None, None).mtld(threshold=0.72))


def test_indices_missing_from_lexicalrichness_follow_their_formulas(tokens: list[str]) -> None:
    # published formulas on raw counts: Honoré (1979) H = 100 ln N / (1 - V_1 / V); Sichel (1975)
    # S = V_2 / V; Brunet (1978) W = N^(V^-0.165)
    frequencies = Counter(tokens)
    n, v = len(tokens), len(frequencies)
    v1 = sum(1 for f in frequencies.values() if f == 1)
    v2 = sum(1 for f in frequencies.values() if f == 2)
    indices = ours(tokens)
    assert indices.honore_h == pytest.approx(100 * np.log(n) / (1 - v1 / v), rel=1e-12)
    assert indices.sichel_s == pytest.approx(v2 / v, rel=1e-12)
    assert indices.brunet_w == pytest.approx(n ** (v**-0.165), rel=1e-12)


def test_as_dict_is_flat_and_complete() -> None:
    indices = ours(list(stdlib_docstring_tokens()[:500]))
    values = indices.as_dict()
    assert {"ttr", "yule_k", "hd_d", "mattr", "mtld", "honore_h", "brunet_w"} <= values.keys()
    assert all(isinstance(x, float | int) for x in values.values())


def test_without_text_order_mattr_and_mtld_are_missing() -> None:
    spectrum = Spectrum.from_frequencies([5, 3, 1, 1, 1])
    indices = richness_indices(spectrum)
    assert indices.mattr is None and indices.mtld is None


def test_undefined_indices_are_none() -> None:
    every_type_once = Spectrum.from_frequencies([1] * 10)
    indices = richness_indices(every_type_once)
    assert indices.dugast_u is None and indices.honore_h is None and indices.hd_d is None


def test_size_matched_ttr_is_the_mean_ttr_of_random_samples() -> None:
    # Monte Carlo: E[V(n)] / n is the mean TTR of random n-token samples; 200 samples within 3 standard errors
    rng = np.random.default_rng(8)
    ids = token_ids(stdlib_docstring_tokens())
    spectrum = spectrum_of_ids(ids)
    n = 1000
    sampled = np.array([np.unique(rng.choice(ids, n, replace=False)).size / n for _ in range(200)])
    at_size = richness_at_size(spectrum, n)
    assert at_size.tokens == n
    assert abs(at_size.ttr - sampled.mean()) < 3 * sampled.std(ddof=1) / np.sqrt(200)
    assert at_size.types == pytest.approx(expected_types(spectrum, n))


def test_size_matched_at_full_size_equals_the_observed_indices() -> None:
    ids = token_ids(stdlib_docstring_tokens())
    spectrum = spectrum_of_ids(ids)
    full = richness_indices(spectrum).as_dict()
    matched = richness_at_size(spectrum, spectrum.tokens).as_dict()
    for name, value in matched.items():
        assert value == pytest.approx(full[name], rel=1e-9), name


def test_mattr_and_mtld_handle_two_million_tokens_quickly() -> None:
    # requirement: a 2-million-token text in a few seconds (generous 10 s bound for slow machines)
    ids = np.random.default_rng(0).zipf(1.3, 2_000_000) % 100_000
    start = time.perf_counter()
    values = (mattr(ids), mtld(ids))
    assert time.perf_counter() - start < 10
    assert 0 < values[0] <= 1 and values[1] > 1
