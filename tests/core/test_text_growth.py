"""Growth by texts: exact rarefaction over texts against brute-force enumeration of every k-subset, and the
incidence formulas of Chao et al. 2014 (Ecological Monographs 84: 45-67)."""

from __future__ import annotations

from itertools import combinations

import numpy as np
import pytest

from app.core import text_growth as tg


def _random_corpus(seed: int, texts: int, types: int) -> list[set[int]]:
    rng = np.random.default_rng(seed)
    weights = 1.0 / np.arange(1, types + 1)  # Zipf-like: some types in many texts, many in one
    corpus = []
    for _ in range(texts):
        size = int(rng.integers(1, 12))
        corpus.append(set(rng.choice(types, size=size, p=weights / weights.sum()).tolist()))
    return corpus


def _incidence(corpus: list[set[int]], types: int) -> tg.Incidence:
    d = np.zeros(types, dtype=np.int64)
    for text in corpus:
        d[list(text)] += 1
    return tg.Incidence.from_document_frequencies(len(corpus), d)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_expected_types_equals_brute_force_over_every_k_subset(seed):
    # Outside reference: the definition itself, averaged over all C(T, k) subsets of texts.
    corpus = _random_corpus(seed, texts=9, types=30)
    incidence = _incidence(corpus, 30)
    for k in range(0, 10):
        sizes = [len(set().union(*subset)) if subset else 0 for subset in combinations(corpus, k)]
        exact = tg.expected_types(incidence, k)[0]
        assert exact == pytest.approx(np.mean(sizes), rel=1e-12, abs=1e-12)
    assert tg.expected_types(incidence, 9)[0] == incidence.observed_types


def test_rarefaction_variance_is_the_unconditional_formula_per_type():
    # Chao et al. 2014 / Colwell et al. 2012 (from memory): var = sum_w (1 - alpha_w)^2 - E^2 / S_hat, with
    # alpha_w = C(T - d_w, k) / C(T, k) written here per type with math.comb instead of per Q_j with gammaln.
    from math import comb

    corpus = _random_corpus(4, texts=12, types=40)
    incidence = _incidence(corpus, 40)
    d = [sum(w in text for text in corpus) for w in range(40)]
    d = [x for x in d if x]
    T = 12
    for k in (1, 3, 6, 11):
        seen = [1 - comb(T - x, k) / comb(T, k) for x in d]
        expected = sum(seen)
        formula = sum(s * s for s in seen) - expected**2 / incidence.chao2
        assert tg.rarefaction_variance(incidence, k)[0] == pytest.approx(max(formula, 0.0), rel=1e-9)


def test_chao2_and_extrapolation_follow_chao_et_al_2014():
    # Q1 = 5, Q2 = 2, Q3 = 1 in T = 10 texts.
    incidence = tg.Incidence(10, ((1, 5), (2, 2), (3, 1)))
    # Chao2 (Chao 1987, as in Chao et al. 2014): S_obs + (T-1)/T Q1^2 / (2 Q2)
    assert incidence.chao2 == pytest.approx(8 + 0.9 * 25 / 4)
    # The extrapolation starts at S_obs and tends to Chao2 (Chao et al. 2014).
    assert tg.extrapolated_types(incidence, 0)[0] == pytest.approx(8)
    assert tg.extrapolated_types(incidence, 10**6)[0] == pytest.approx(incidence.chao2)
    # One more text adds (1 - C_hat) U / T types, C_hat the incidence sample coverage of Chao et al. 2014:
    # C_hat = 1 - Q1 / U [(T-1) Q1 / ((T-1) Q1 + 2 Q2)], U = sum_j j Q_j the total incidences.
    T, q1, q2, U = 10, 5, 2, 5 + 4 + 3
    coverage = 1 - q1 / U * ((T - 1) * q1 / ((T - 1) * q1 + 2 * q2))
    gained = tg.extrapolated_types(incidence, 1)[0] - 8
    assert gained == pytest.approx((1 - coverage) * U / T)


def test_chao2_without_doubletons_uses_the_bias_corrected_form():
    # Chao et al. 2014 (from memory): Q0 = (T-1)/T Q1 (Q1 - 1) / 2 when Q2 = 0.
    incidence = tg.Incidence(6, ((1, 4), (3, 2)))
    assert incidence.undetected == pytest.approx(5 / 6 * 4 * 3 / 2)


def test_plan_inverts_the_extrapolation_and_brackets_it():
    corpus = _random_corpus(5, texts=40, types=400)
    incidence = _incidence(corpus, 400)
    pairs = [(t, w) for t, text in enumerate(corpus) for w in text]
    text_of, type_of = np.array(pairs).T
    boot = tg.bootstrap_over_texts(40, text_of, type_of, 400, replicates=50, seed=1)
    more = 25
    target = float(tg.extrapolated_types(incidence, more)[0]) - 1e-9
    plan = tg.plan_texts(incidence, boot, target)
    assert plan.more == more
    assert plan.more_low <= plan.more
    assert plan.more_high is None or plan.more_high >= plan.more
    assert tg.plan_texts(incidence, boot, incidence.observed_types - 1).more == 0
    with pytest.raises(tg.UnreachableTextTargetError, match="Chao2"):
        tg.plan_texts(incidence, boot, incidence.chao2 + 1)


def test_bootstrap_of_identical_texts_has_no_spread():
    # Every resample of identical texts is the same corpus: a standard error of 0 (common practice check).
    text_of = np.repeat(np.arange(5), 3)
    type_of = np.tile(np.arange(3), 5)
    boot = tg.bootstrap_over_texts(5, text_of, type_of, 3, replicates=20)
    assert np.all(boot.observed == 3)
    assert np.allclose(tg.extrapolation_sd(boot, np.array([0, 5, 50])), 0.0)


def test_bootstrap_document_frequencies_match_an_explicit_resample():
    # Outside reference: the resampled corpus built text by text from the same draws (Efron 1979).
    corpus = _random_corpus(6, texts=15, types=60)
    pairs = [(t, w) for t, text in enumerate(corpus) for w in text]
    text_of, type_of = np.array(pairs).T
    boot = tg.bootstrap_over_texts(15, text_of, type_of, 60, replicates=3, seed=7)
    rng = np.random.default_rng(7)
    for r in range(3):
        drawn = rng.multinomial(15, np.full(15, 1 / 15))
        resampled = [corpus[t] for t in range(15) for _ in range(drawn[t])]
        incidence = _incidence(resampled, 60)
        assert boot.observed[r] == incidence.observed_types
        assert boot.q1[r] == incidence.q(1)
        assert boot.undetected[r] == pytest.approx(incidence.undetected)
