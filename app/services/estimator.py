"""Estimator: predictions from published totals only (no spectrum), and the uniform (balanced) design."""

from __future__ import annotations

from typing import Any

import numpy as np

from app.core import planning
from app.core.models import fit_from_totals
from app.core.models.base import log_factor_curve
from app.core.uniform import uniform_expected_types_closed_form, uniform_expected_types_exact
from app.core.validity import first_problem, incoherence, range_within_possible, types_problem

LEGOMENA_SHOWN = 10
CURVE_POINTS = 50
MAX_UNIFORM_TOKENS = 10**9

ASSUMPTION_WITH_HAPAXES = (
    "The text is assumed to be a random sample of a perfectly Zipfian population (spectrum V_m = W / (m (m+1)) "
    "at the Zipf size Z): Z and W are solved so that the model reproduces your tokens, types and hapax legomena. "
    "Fitted so to random samples of public-domain books, it missed their V at 10x by a median of 20% (at 4x: 6%); "
    "on simulated populations by a median of 17% (closed word lists) to 56% (saturating vocabularies) (accuracy "
    "benchmark)."
)
PAST_ERROR_FACTORS = (4.0, 10.0)
"""Extrapolation factors of ``PAST_WORST_ERRORS``."""
PAST_WORST_ERRORS = (0.1534, 0.3643)
"""The largest |relative error| of V by this model (solved from N, V and V_1) over 36 random samples of 9
public-domain books (English, French, Dutch; 16,855 to 169,822 tokens), fitted on 25% and on 10% of each and
predicting the whole: ``benchmarks/accuracy.py --states 4``, run of 2026-12-05 (README, Accuracy)."""
PAST_ERROR_RANGE = (
    "range of past errors: the prediction times (1 + e)^-1 .. (1 + e), e the largest error of this model on 36 "
    "random samples of books at the same extrapolation factor (15% at 4x, 36% at 10x, in proportion to log t "
    "in between and beyond); not a confidence interval: texts unlike those books (saturating or mixed "
    "vocabularies, collections of short texts) have missed by more"
)
NO_RANGE_WITHOUT_HAPAXES = (
    "no range: without the hapax count the model rests on an assumed V_1 = V/2, whose error the benchmark did not "
    "measure"
)
ASSUMPTION_TOTALS_ONLY = (
    "No hapax count was given, so the text is assumed to be perfectly Zipfian at its own size (x = 1): half of "
    "the types are hapax legomena (V_1 = V/2 = {hapaxes:,.0f} here, an assumption, not a count), one sixth dis "
    "legomena, V_k = V / (k (k+1)); Z and W are then solved from your tokens and types. Real texts often "
    "differ: their hapax share typically lies between about 40% and 65%, so give the hapax count if you have it."
)


def estimate_from_totals(
    tokens: int, types: int, hapaxes: int | None, sizes: list[int], target: planning.Target | None = None
) -> dict[str, Any]:
    """Predicted legomena at the given size and type growth at ``sizes`` by the perfect-Zipf model; with a
    ``target`` also the size at which the model reaches it (planning).

    Numbers pass the rules of ``app.core.validity``: when the fit is degenerate (``FittedModel.degenerate``,
    e.g. a hapax share so small that the Zipf size falls below one token) the result holds the reason in
    ``not_applicable`` and no numbers; a row whose types or legomena are impossible at its size (the formula
    is a fitted curve that can give more types than tokens at tiny sizes) holds its own ``not_applicable``."""
    if types > tokens:
        raise ValueError("types cannot exceed tokens")
    if hapaxes is not None and not 0 < hapaxes < types:
        raise ValueError("hapax legomena must be more than 0 and fewer than the types")
    fitted = fit_from_totals(tokens, types, hapaxes)
    out = {
        "input": {"tokens": tokens, "types": types, "hapaxes": hapaxes},
        "model": fitted.model.name,
        "assumption": ASSUMPTION_WITH_HAPAXES
        if hapaxes is not None
        else ASSUMPTION_TOTALS_ONLY.format(hapaxes=types / 2),
        "not_applicable": None,
    }
    if fitted.degenerate:
        reason = f"the perfect-Zipf fit to these totals is degenerate: {fitted.degenerate}"
        empty = {"params": None, "zipf_size": None, "curve": None, "predictions": [], "plan": None}
        return out | {"not_applicable": reason} | empty
    curve = np.unique(np.geomspace(max(1, tokens / 100), max([10 * tokens, *sizes]), CURVE_POINTS).round())
    curve_types = [  # a point whose types are impossible at its size is left out (null)
        None if types_problem(n, v, tokens, types) else v
        for n, v in zip(curve.tolist(), np.asarray(fitted.types(curve), dtype=float).tolist(), strict=True)
    ]
    return out | {
        "range_method": PAST_ERROR_RANGE if hapaxes is not None else NO_RANGE_WITHOUT_HAPAXES,
        "curve": {"tokens": curve.tolist(), "types": curve_types},
        "params": {k: float(v) for k, v in fitted.params.items()},
        "zipf_size": float(fitted.params["zipf_size"]),
        "predictions": [
            _row(fitted, n, tokens, types, hapaxes is not None) for n in sorted({tokens, *sizes})
        ],
        "plan": None if target is None else _plan(fitted, target),
    }


def past_error_range(n: float, expected: float, tokens: int, types: int) -> tuple[float, float]:
    """The ends of ``PAST_ERROR_RANGE`` for E[V(n)] = ``expected``: e(t) = exp(log_factor_curve of the log
    worst errors at t = n / N) - 1, both ends kept within what n tokens can hold (``range_within_possible``)."""
    log_error = float(log_factor_curve(PAST_ERROR_FACTORS, tuple(np.log1p(PAST_WORST_ERRORS)), n / tokens))
    low, high = range_within_possible(
        n, expected * np.exp(-log_error), expected * np.exp(log_error), tokens, types
    )
    return float(low), float(high)


def _row(fitted, n: int, tokens: int, types: int, with_range: bool) -> dict[str, Any]:
    """One row of predictions at n tokens (with ``PAST_ERROR_RANGE`` when ``with_range``), or its reason for
    being not applicable."""
    expected = float(fitted.types(n))
    legomena = fitted.spectrum(n, LEGOMENA_SHOWN)
    problem = first_problem((types_problem(n, expected, tokens, types), incoherence(expected, legomena)))
    low, high = past_error_range(n, expected, tokens, types) if with_range and not problem else (None, None)
    return {
        "tokens": n,
        "types": None if problem else expected,
        "types_low": low,
        "types_high": high,
        "legomena": None if problem else {str(k): float(v) for k, v in enumerate(legomena, start=1)},
        "extrapolated": n > tokens,
        "not_applicable": problem,
    }


def _plan(fitted, target: planning.Target) -> dict[str, Any]:
    try:
        needed = planning.plan(fitted, target)
    except planning.UnreachableTargetError as exc:
        return {"target": {"kind": target.kind, "value": target.value}, "error": str(exc)}
    return {
        "target": {"kind": target.kind, "value": target.value},
        "tokens": needed,
        "model": fitted.model.name,
    }


def uniform_design(types: int, repeats: int, draws: list[int]) -> dict[str, Any]:
    """k types each occurring r times: exact (hypergeometric) and closed-form expected types after n draws."""
    total = types * repeats
    if total > MAX_UNIFORM_TOKENS:
        raise ValueError(f"types x repeats must be at most {MAX_UNIFORM_TOKENS:,}")
    if any(not 0 <= n <= total for n in draws):
        raise ValueError(f"draws must lie between 0 and types x repeats = {total:,}")
    return {
        "input": {"types": types, "repeats": repeats},
        "assumption": "Draws are made at random without replacement from k types that each occur r times "
        "(a balanced design). Exact: k (1 - C(kr - r, n) / C(kr, n)); closed form: k (1 - (1 - n/(kr))^r).",
        "rows": [
            {
                "draws": n,
                "types_exact": uniform_expected_types_exact(types, repeats, n),
                "types_closed_form": float(uniform_expected_types_closed_form(types, repeats, n)),
            }
            for n in draws
        ],
    }
