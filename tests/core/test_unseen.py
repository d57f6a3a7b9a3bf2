"""Unseen-vocabulary estimators against a published worked example, hand computations, the Euler
transform written out, and simulated populations whose truth is known."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import binom

from app.core.spectrum import Spectrum
from app.core.unseen import (
    chao1,
    efron_thisted,
    good_toulmin,
    good_turing_coverage,
    new_type_rate,
    smoothed_good_toulmin,
    smoothed_truncation_survival,
    unseen_summary,
)

# Fisher, Corbet & Williams (1943): Malayan butterflies, species seen m = 1..24 times
BUTTERFLIES = Spectrum.from_pairs(
    enumerate(
        [118, 74, 44, 24, 29, 22, 20, 19, 20, 15, 12, 14, 6, 12, 6, 9, 9, 6, 10, 10, 11, 5, 3, 3], start=1
    )
)


def test_good_toulmin_on_butterflies() -> None:
    # Efron & Thisted (1976), from memory: Good-Toulmin predicts about 75 new species for as much trapping
    # again (t = 1)
    assert good_toulmin(BUTTERFLIES, 1.0).value == pytest.approx(75, abs=0.5)


def test_good_toulmin_equals_the_series_written_out() -> None:
    # formula (Good & Toulmin 1956): U(t) = -sum_m (-t)^m V_m, summed here term by term in exact fractions
    t = 0.4
    direct = -sum((-t) ** int(m) * int(v) for m, v in zip(BUTTERFLIES.m, BUTTERFLIES.vm, strict=True))
    assert good_toulmin(BUTTERFLIES, t).value == pytest.approx(direct, rel=1e-12)
    assert "t <= 1" in good_toulmin(BUTTERFLIES, t).validity


def test_chao1_by_hand() -> None:
    # Chao (1984): V = 10, V_1 = 6, V_2 = 3 -> S = 10 + 36 / 6 = 16; bias-corrected 10 + 6*5 / (2*4) = 13.75
    spectrum = Spectrum.from_pairs([(1, 6), (2, 3), (4, 1)])
    assert chao1(spectrum).value == pytest.approx(16.0)
    assert chao1(spectrum, bias_corrected=True).value == pytest.approx(13.75)


def test_chao1_falls_back_to_bias_corrected_without_dis_legomena() -> None:
    # V = 6, V_1 = 4, V_2 = 0: the plain form divides by zero; bias-corrected 6 + 4*3 / (2*1) = 12
    spectrum = Spectrum.from_pairs([(1, 4), (3, 2)])
    estimate = chao1(spectrum)
    assert estimate.value == pytest.approx(12.0)
    assert "bias-corrected" in estimate.method


def test_good_turing_coverage_and_new_type_rate_by_hand() -> None:
    # Good (1953): N = 6*1 + 3*2 + 1*4 = 16 tokens, V_1 = 6 -> new-type rate 6/16, coverage 10/16
    spectrum = Spectrum.from_pairs([(1, 6), (2, 3), (4, 1)])
    assert new_type_rate(spectrum).value == pytest.approx(6 / 16)
    assert good_turing_coverage(spectrum).value == pytest.approx(10 / 16)


def euler_transform_written_out(spectrum: Spectrum, t: float, terms: int) -> float:
    """Euler transform of U(t) = sum_m c_m t^m, c_m = (-1)^(m+1) V_m: with t = u / (1 - u),
    t^m = sum_j C(m + j - 1, j) u^(m+j), so U = sum_y u^y sum_{m<=y} C(y-1, m-1) c_m; keep y <= terms."""
    u = t / (1 + t)
    return sum(
        u**y * sum(math.comb(y - 1, m - 1) * (-1) ** (m + 1) * spectrum.count(m) for m in range(1, y + 1))
        for y in range(1, terms + 1)
    )


@pytest.mark.parametrize(("t", "terms"), [(0.5, 4), (1.0, 10), (2.0, 10), (4.5, 7)])
def test_efron_thisted_is_the_truncated_euler_transform(t: float, terms: int) -> None:
    # Efron & Thisted (1976): Euler's transformation of the Good-Toulmin series, written out independently
    reference = euler_transform_written_out(BUTTERFLIES, t, terms)
    assert efron_thisted(BUTTERFLIES, t, terms).value == pytest.approx(reference, rel=1e-9)


def test_efron_thisted_converges_to_good_toulmin_with_many_terms() -> None:
    # for a finite spectrum U(t) is a polynomial and the Euler series in u = t / (1 + t) < 1 converges to it
    assert efron_thisted(BUTTERFLIES, 0.5, 300).value == pytest.approx(
        good_toulmin(BUTTERFLIES, 0.5).value, rel=1e-9
    )


def test_smoothed_good_toulmin_is_plain_for_t_at_most_one() -> None:
    for t in (0.3, 1.0):
        assert smoothed_good_toulmin(BUTTERFLIES, t).value == pytest.approx(
            good_toulmin(BUTTERFLIES, t).value
        )


def binomial_smoothed(spectrum: Spectrum, t: float, trials: int, q: float) -> float:
    """-sum_{m<=trials} (-t)^m P(Bin(trials, q) >= m) V_m, written out for any truncation."""
    return -sum((-t) ** m * binom.sf(m - 1, trials, q) * spectrum.count(m) for m in range(1, trials + 1))


@pytest.fixture(scope="module")
def simulated_samples() -> tuple[list[tuple[Spectrum, float]], float, int]:
    """60 samples of N = 5000 tokens from a Zipf population of 20000 types, with the expected number of
    new types in 3 N further tokens given each sample (the truth the estimators aim at)."""
    rng = np.random.default_rng(1956)
    probabilities = 1 / np.arange(1, 20_001)
    probabilities /= probabilities.sum()
    n, t = 5000, 3.0
    samples = []
    for _ in range(60):
        counts = rng.multinomial(n, probabilities)
        unseen = probabilities[counts == 0]
        truth = float(np.sum(-np.expm1(t * n * np.log1p(-unseen))))
        samples.append((Spectrum.from_frequencies(counts[counts > 0]), truth))
    return samples, t, n


def relative_rmse(errors: list[float], truths: list[float]) -> float:
    return math.sqrt(np.mean(np.square(errors))) / np.mean(truths)


def plain_series(spectrum: Spectrum, t: float) -> float:
    """U(t) = -sum_m (-t)^m V_m (Good & Toulmin 1956), written out term by term."""
    return -sum((-t) ** int(m) * int(v) for m, v in zip(spectrum.m, spectrum.vm, strict=True))


def test_smoothed_good_toulmin_beats_plain_on_simulated_population(simulated_samples) -> None:
    # Orlitsky, Suresh & Wu (2016): at t = 3 plain Good-Toulmin explodes while both smoothings stay within
    # a few percent of the truth (relative RMSE bound 15%: common practice for "accurate" here); t = 3 lies
    # within log_10 N = 3.7, so the smoothed estimates are given, and beyond t = 1, so the plain one is not
    samples, t, _ = simulated_samples
    truths = [truth for _, truth in samples]
    for kind in ("binomial", "poisson"):
        errors = [smoothed_good_toulmin(s, t, kind).value - truth for s, truth in samples]
        assert relative_rmse(errors, truths) < 0.15
    plain = np.array([plain_series(s, t) - truth for s, truth in samples])
    assert np.median(np.abs(plain)) > 100 * np.mean(truths)
    refused = [good_toulmin(s, t) for s, _ in samples]
    assert all(e.value is None and "t <= 1 (Good & Toulmin 1956)" in e.not_applicable for e in refused)


def test_binomial_truncation_recalled_from_memory_is_near_optimal(simulated_samples) -> None:
    # the truncation k = round(0.5 log_3(N t^2 / (t - 1))), q = 2 / (t + 2) is recalled from memory
    # (Orlitsky, Suresh & Wu 2016); on the simulation it must come within 50% of the error of the best fixed
    # number of trials, and match the same estimator written out here
    samples, t, n = simulated_samples
    truths = [truth for _, truth in samples]
    q = 2 / (t + 2)
    by_trials = {
        k: relative_rmse([binomial_smoothed(s, t, k, q) - truth for s, truth in samples], truths)
        for k in range(1, 13)
    }
    chosen = round(0.5 * math.log(n * t * t / (t - 1), 3))
    assert np.count_nonzero(smoothed_truncation_survival(n, t, np.arange(1, 30))) == chosen
    assert by_trials[chosen] <= 1.5 * min(by_trials.values())
    spectrum = samples[0][0]
    assert smoothed_good_toulmin(spectrum, t).value == pytest.approx(
        binomial_smoothed(spectrum, t, chosen, q)
    )


def test_summary_lists_every_estimator_with_its_validity() -> None:
    rows = unseen_summary(BUTTERFLIES, ts=(2.0, 5.0))
    assert [row.method for row in rows][:4] == [
        "Good-Turing coverage",
        "Good-Turing new-type rate",
        "Chao1",
        "Good-Toulmin",
    ]
    assert len(rows) == 8
    # each row is a finite number or, exclusively, the reason it is not applicable
    assert all(row.validity and ((row.value is None) != (row.not_applicable is None)) for row in rows)
    assert all(row.value is None or math.isfinite(row.value) for row in rows)
    assert {row.t for row in rows if row.t is not None} == {1.0, 2.0, 5.0}
    # N = 3306: smoothed Good-Toulmin reaches t = log_10 3306 = 3.52 (Orlitsky, Suresh & Wu 2016, with our
    # constant), the Euler transformation t < 5 (Good & Toulmin 1956): at t = 5 both are not applicable
    at_five = {row.method.split(" (")[0]: row for row in rows if row.t == 5.0}
    assert "log_10 N = 3.52" in at_five["smoothed Good-Toulmin"].not_applicable
    assert "t < 5" in at_five["Efron-Thisted"].not_applicable
    assert all(row.value is not None for row in rows if row.t in (None, 1.0, 2.0))


def test_rejects_bad_arguments() -> None:
    with pytest.raises(ValueError):
        good_toulmin(BUTTERFLIES, 0.0)
    with pytest.raises(ValueError):
        smoothed_good_toulmin(BUTTERFLIES, 2.0, "gaussian")
