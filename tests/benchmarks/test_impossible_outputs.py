"""The impossible-output counter of the accuracy benchmark flags hand-made impossible predictions."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from app.core.unseen import NEW_TYPES, TOTAL_TYPES, UnseenEstimate
from benchmarks.impossible_outputs import (
    BELOW_SAMPLE,
    FALLING,
    LEGOMENA_OVER_TYPES,
    NEGATIVE,
    NEGATIVE_NEW_TYPES,
    NOT_FINITE,
    RANGE_BELOW_SAMPLE,
    RANGE_END_MISSING,
    UNSEEN_NOT_FINITE,
    prediction_problems,
    unseen_problems,
)

SAMPLE_TYPES = 1_000


@dataclass
class Handmade:
    """A prediction given as tables by size: V, V_1..V_k (the rest 0) and the range of V."""

    types_at: dict[float, float]
    legomena_at: dict[float, list[float]]
    range_at: dict[float, tuple[float, float]]

    def types(self, n: float) -> float:
        return self.types_at[n]

    def spectrum(self, n: float, k_max: int = 20) -> np.ndarray:
        out = np.zeros(k_max)
        given = self.legomena_at[n][:k_max]
        out[: len(given)] = given
        return out

    def types_low(self, n: float) -> float:
        return self.range_at[n][0]

    def types_high(self, n: float) -> float:
        return self.range_at[n][1]


def _sound() -> dict[str, Any]:
    """V growing from the sample's 1,000 types, legomena summing to less than V, ranges above 1,000."""
    return {
        "types_at": {2000.0: 1500.0, 4000.0: 2200.0, 10000.0: 3500.0},
        "legomena_at": {2000.0: [700, 200], 4000.0: [1000, 300], 10000.0: [1600, 500]},
        "range_at": {2000.0: (1400, 1600), 4000.0: (2000, 2400), 10000.0: (3000, 4000)},
    }


def test_a_sound_prediction_has_no_problem():
    predictor = Handmade(**_sound())
    assert prediction_problems(predictor, SAMPLE_TYPES, [2000.0, 4000.0, 10000.0]) == {}


def test_each_impossible_output_is_flagged_at_its_size():
    # Any larger sample contains the 1,000 types already seen, so V >= 1,000, V does not fall, and
    # V_1 + ... + V_k <= V (sum_m V_m = V: Baayen 2001, ch. 2); counts are finite and non-negative.
    table = _sound()
    table["types_at"][2000.0] = 900.0  # below the sample's V
    table["legomena_at"][2000.0] = [800, 200]  # 800 + 200 > 900
    table["types_at"][4000.0] = 2_000.0
    table["types_at"][10000.0] = 1_800.0  # falls from 2,000 at the size before
    table["legomena_at"][4000.0] = [1000, -5]  # a negative V_2
    table["legomena_at"][10000.0] = [np.nan, 10]  # V_1 not a number
    table["range_at"][4000.0] = (950, np.inf)  # one end below 1,000, the other missing
    found = prediction_problems(Handmade(**table), SAMPLE_TYPES, [10000.0, 2000.0, 4000.0])
    assert found == {
        BELOW_SAMPLE: 1,
        LEGOMENA_OVER_TYPES: 1,
        FALLING: 1,
        NEGATIVE: 1,
        NOT_FINITE: 1,
        RANGE_BELOW_SAMPLE: 1,
        RANGE_END_MISSING: 1,
    }


def test_negative_and_non_finite_unseen_estimates_are_flagged():
    estimates = [
        UnseenEstimate("Good-Toulmin", NEW_TYPES, -12.0, "", 1.0),
        UnseenEstimate("Efron-Thisted", NEW_TYPES, 30.0, "", 2.0),
        UnseenEstimate("smoothed", NEW_TYPES, float("inf"), "", 10.0),
        UnseenEstimate("Chao1", TOTAL_TYPES, 1500.0, ""),
    ]
    assert unseen_problems(estimates) == {NEGATIVE_NEW_TYPES: 1, UNSEEN_NOT_FINITE: 1}
    assert unseen_problems(estimates[1:2]) == {}
    withheld = UnseenEstimate("Good-Toulmin", NEW_TYPES, None, "", 5.0, "beyond t = 1")
    assert unseen_problems([withheld]) == {}
