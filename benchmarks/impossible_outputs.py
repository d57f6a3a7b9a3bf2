"""Impossible outputs: values that no random sample of the population could have, whatever the population.

A sample of n tokens has V types. Any larger sample of the same population that contains it has at least
those V types, its types never fall as it grows, and any spectrum obeys V_1 + ... + V_k <= V for every k
(Baayen 2001, ch. 2: sum_m V_m = V). So for a prediction at a size s > n, each of these is impossible:

- a negative count (V or any V_k), or one that is not a finite number;
- V(s) below the sample's V, or V falling from one size checked to the next;
- V_1 + ... + V_k > V (V_1 > V first of all);
- a nominal range of V(s) with an end missing (infinite or not a number), or with an end below the
  sample's V (the truth cannot lie there);
- from the unseen-vocabulary estimators (``app.core.unseen.unseen_summary``): a negative number of new
  types in further text, or a value that is not a finite number.

``prediction_problems`` counts them for anything with the verbs of ``app.core.anchored.Anchored``
(``types``, ``spectrum``, ``types_low``, ``types_high``); each category counts at most once per size.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Sequence
from typing import Any

import numpy as np

from app.core.unseen import NEW_TYPES, UnseenEstimate

NEGATIVE = "negative count"
NOT_FINITE = "value not finite"
BELOW_SAMPLE = "V below the sample's V"
FALLING = "V falls as the size grows"
LEGOMENA_OVER_TYPES = "V_1 + ... + V_k > V"
RANGE_END_MISSING = "range end missing (inf or NaN)"
RANGE_BELOW_SAMPLE = "range end below the sample's V"
NEGATIVE_NEW_TYPES = "negative new-type estimate"
UNSEEN_NOT_FINITE = "unseen estimate not finite"
CATEGORIES = (
    NEGATIVE,
    NOT_FINITE,
    BELOW_SAMPLE,
    FALLING,
    LEGOMENA_OVER_TYPES,
    RANGE_END_MISSING,
    RANGE_BELOW_SAMPLE,
    NEGATIVE_NEW_TYPES,
    UNSEEN_NOT_FINITE,
)
LEGOMENA_CHECKED = 20
"""V_1..V_20 are checked at every size (what the prediction table and the API show)."""
TOLERANCE = 1e-9
"""Relative rounding allowed before a comparison counts as broken."""


def prediction_problems(predictor: Any, sample_types: int, sizes: Iterable[float]) -> Counter[str]:
    """Impossible outputs of ``predictor`` at each of ``sizes`` (all larger than the sample's size), for a
    sample of ``sample_types`` types (module docstring)."""
    problems: Counter[str] = Counter()
    floor = sample_types * (1 - TOLERANCE)
    previous = None
    for size in sorted(sizes):
        types = float(predictor.types(size))
        legomena = np.asarray(predictor.spectrum(size, LEGOMENA_CHECKED), dtype=float)
        low, high = float(predictor.types_low(size)), float(predictor.types_high(size))
        values = np.concatenate(([types], legomena))
        finite = np.isfinite(values)
        found = {
            NOT_FINITE: not finite.all(),
            NEGATIVE: bool(np.any(values[finite] < 0)),
            BELOW_SAMPLE: types < floor,
            FALLING: previous is not None and types < previous * (1 - TOLERANCE),
            LEGOMENA_OVER_TYPES: bool(np.any(np.cumsum(legomena) > types * (1 + TOLERANCE))),
            RANGE_END_MISSING: not (np.isfinite(low) and np.isfinite(high)),
            RANGE_BELOW_SAMPLE: min(low, high) < floor,
        }
        problems.update(name for name, broken in found.items() if broken)
        if np.isfinite(types):
            previous = types
    return problems


def unseen_problems(estimates: Sequence[UnseenEstimate]) -> Counter[str]:
    """Negative new-type estimates and estimates that are not finite numbers; an estimate withheld with its
    reason (``value`` None) is an answer, not an impossible output."""
    problems: Counter[str] = Counter()
    for estimate in estimates:
        if estimate.value is None:
            continue
        if not np.isfinite(estimate.value):
            problems[UNSEEN_NOT_FINITE] += 1
        elif estimate.quantity == NEW_TYPES and estimate.value < 0:
            problems[NEGATIVE_NEW_TYPES] += 1
    return problems
