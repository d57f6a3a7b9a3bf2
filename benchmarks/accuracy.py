"""Accuracy benchmark: how well every model and the recommended ensemble extrapolate, against known truth.

Usage: ``python benchmarks/accuracy.py [DIR] [--states K] [--fractions 0.1,0.25] [--kinds ...] [--quick]
[--jobs J]``

Six kinds of data, each a set of "wholes" of N tokens whose V(N) and V_1(N) are known exactly:

- Simulated populations (``benchmarks/populations.py``, numpy, seeded): closed lists of 2,000 types,
  finite Zipf-Mandelbrot populations that saturate, open Zipfian vocabularies and mixtures of a closed and
  an open part. The whole is one draw of N tokens from the population; the population's own expectation
  E[V(N)] is shown beside it.
- Long books: every ``.txt`` file of DIR (a Project Gutenberg header and licence, when both the
  ``*** START OF`` and ``*** END OF`` markers are present, are cut off first; ``***START OF`` also
  counts), tokenized by the ingestion service with the default profile, exactly as an upload would be.
- Short-text collections: the same books cut into passages of at least PASSAGE_TOKENS tokens at paragraph
  boundaries (blank lines); the sample is made of whole passages. These collections are built from books,
  not collected from short texts: they keep the clustering of words within a passage that a random
  sample of tokens breaks up, as a collection of short texts would.

For each whole and each fraction F (default 10% and 25%), K random samples (seeded; default 8) of
round(F N) tokens drawn without replacement (round(F P) of the P passages for a collection); on long books
also the first round(F N) tokens (the text-order prefix, reported per book only). On each sample
``app.core.backtest.backtest`` runs (the call the modelling service makes: every model of ``MODELS``, the
backtests and the ``recommended`` ensemble with its ranges), and every predictor predicts at the full size N
as the service does beyond the corpus size (continued from the sample, ``app.core.anchored.Anchored``):

- signed errors 100 (predicted - true) / true of V and V_1 at N (V_1 only when the whole has at least
  MIN_HAPAXES hapax legomena: a closed list seen whole has none);
- whether the nominal 90% range of V holds the true V, its half-width 100 (high - low) / 2 / prediction,
  and whether one of its ends lies below the V already seen in the sample (impossible);
- impossible outputs (``benchmarks/impossible_outputs.py``) at N and at 2, 4, 10 and 100 times the sample
  size, and those of ``app.core.unseen.unseen_summary`` of the sample;
- the weights of the models in the recommendation.

The summary per kind and fraction gives, per predictor, the median and worst |error|, the worst per-whole
|bias| (mean signed error over one whole's K samples), the coverage and median half-width of the ranges,
and the counts of impossible outputs; then the targets for the recommendation at 10x beside the measured
figures. Long books also keep the per-book table and the interpolation check: the exact random-sample
E[V(n)] (``app.core.interpolation``, hypergeometric) against the mean V of 30 random samples of n tokens,
n = 5%, 20% and 50% of N (the formula is exact: the differences should be a few standard errors at most).

The output is Markdown, with the machine, the library versions, the settings and the run time. Measured on
a shared 2-core machine, one process: ``--quick`` (2 samples per whole, the first population of each
simulated kind, the QUICK_TEXTS smallest texts; 56 fits) about 1.5 minutes, the default (498 fits on nine
books of 17,000 to 170,000 tokens) about 10 minutes; ``--jobs 2`` fits on two processes.
"""

from __future__ import annotations

import argparse
import contextlib
import os
import platform
import re
import sys
import time
import warnings
import zlib
from collections import Counter
from collections.abc import Iterable, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import scipy
from scipy import stats

from app.core.anchored import Anchored
from app.core.backtest import backtest
from app.core.interpolation import expected_types
from app.core.models import MODELS
from app.core.spectrum import Spectrum
from app.core.unseen import unseen_summary
from app.ingest.counting import count_sources
from app.ingest.profiles import get_profile
from app.ingest.readers import TextSource

sys.path.insert(0, str(Path(__file__).resolve().parent))
from impossible_outputs import (  # noqa: E402 - sibling scripts, not a package
    CATEGORIES,
    RANGE_BELOW_SAMPLE,
    prediction_problems,
    unseen_problems,
)
from populations import (  # noqa: E402
    CLOSED,
    MIXTURE,
    OPEN,
    SATURATING,
    SIMULATED_KINDS,
    Population,
    populations,
)

RECOMMENDED = "recommended"
PREDICTORS = (*MODELS, RECOMMENDED)
BOOKS = "books"
COLLECTIONS = "collections"
NATURAL_KINDS = (BOOKS, COLLECTIONS)
KINDS = (*SIMULATED_KINDS, *NATURAL_KINDS)
KIND_MEANINGS = {
    CLOSED: "simulated closed lists of 2,000 types, which the whole has seen entirely",
    SATURATING: "simulated finite Zipf-Mandelbrot populations of 6,000 and 10,000 types, mostly seen",
    OPEN: "simulated open Zipfian vocabularies (10 million types, or without bound)",
    MIXTURE: "simulated mixtures of a closed list and an open vocabulary",
    BOOKS: "long books of DIR; samples of random tokens",
    COLLECTIONS: "the same books cut into passages; samples of random whole passages (built from books)",
}
CHECK_FACTORS = (2, 4, 10, 100)
"""Sizes, as multiples of the sample's, where impossible outputs are looked for (with N itself)."""
MIN_HAPAXES = 10
"""Fewest hapax legomena of a whole for a % error of V_1 to mean something (a choice of ours)."""
PASSAGE_TOKENS = 300
"""A passage of a short-text collection: paragraphs joined until they hold at least this many tokens."""
INTERPOLATION_SHARES = (0.05, 0.2, 0.5)
MONTE_CARLO_SAMPLES = 30
DEFAULT_STATES = 8
"""Random samples per whole and fraction: 24 per simulated kind and fraction, 72 per natural kind."""
QUICK_TEXTS = 4
"""--quick: the smallest files of DIR only, and the first population of each simulated kind."""

_START = re.compile(r"^\*\*\* ?START OF[^\n]*\n?", re.MULTILINE)
_END = re.compile(r"^\*\*\* ?END OF", re.MULTILINE)
_PARAGRAPH_BREAK = re.compile(r"\n[ \t\r\f\v]*\n")


# --- reading texts ------------------------------------------------------------------------------------


def strip_gutenberg(text: str) -> str:
    """The text between the Project Gutenberg start and end marker lines; the whole text without both."""
    start = _START.search(text)
    end = _END.search(text, start.end()) if start else None
    return text[start.end() : end.start()] if start and end else text


def read_body(path: Path) -> str:
    """The file's text without its Project Gutenberg header and licence."""
    return strip_gutenberg(TextSource.from_path(path).read_text())


def token_ids_of(name: str, body: str) -> np.ndarray:
    """Type id of every token of ``body``, in text order (default tokenization profile, as an upload)."""
    with count_sources([TextSource.from_text(name, body)], get_profile("default")) as counted:
        return np.array(counted.type_ids())


def token_ids(path: Path) -> np.ndarray:
    """Type id of every token of the file, in text order (default tokenization profile)."""
    return token_ids_of(path.name, read_body(path))


def passage_bounds(body: str, tokens: int, passage_tokens: int = PASSAGE_TOKENS) -> np.ndarray:
    """Token offsets [0, b_1, ..., N] of the passages of ``body``: paragraphs (split at blank lines),
    each tokenized with the default profile, joined in order until a passage holds at least
    ``passage_tokens`` tokens; a shorter remainder at the end joins the last passage. ``tokens`` is the
    token count of the whole body, which the paragraphs' counts must add up to (no token spans a blank
    line)."""
    tokenizer = get_profile("default").tokenizer()
    counts = [tokenizer.token_series(p).len() for p in _PARAGRAPH_BREAK.split(body)]
    if sum(counts) != tokens:
        raise ValueError(
            f"the paragraphs hold {sum(counts):,} tokens but the whole text {tokens:,}: cannot cut passages"
        )
    bounds, held = [0], 0
    for count in counts:
        held += count
        if held >= passage_tokens:
            bounds.append(bounds[-1] + held)
            held = 0
    if held:
        if len(bounds) > 1:
            bounds[-1] += held
        else:
            bounds.append(held)
    return np.array(bounds)


def spectrum_of(ids: np.ndarray) -> Spectrum:
    """Frequency spectrum of a sequence of type ids."""
    counts = np.bincount(ids)
    return Spectrum.from_frequencies(counts[counts > 0])


def random_sample(ids: np.ndarray, n: int, rng: np.random.Generator) -> np.ndarray:
    """n tokens of the sequence drawn at random without replacement."""
    return ids[rng.choice(ids.size, size=n, replace=False)]


def passage_sample(ids: np.ndarray, bounds: np.ndarray, count: int, rng: np.random.Generator) -> np.ndarray:
    """The tokens of ``count`` passages drawn at random without replacement."""
    chosen = rng.choice(bounds.size - 1, size=count, replace=False)
    return np.concatenate([ids[bounds[i] : bounds[i + 1]] for i in np.sort(chosen)])


def generator(*labels: object) -> np.random.Generator:
    """A numpy Generator seeded from the labels (CRC-32 of each: the same stream on every run)."""
    return np.random.default_rng([zlib.crc32(str(label).encode()) for label in labels])


# --- wholes and samples -------------------------------------------------------------------------------


@dataclass(frozen=True)
class Whole:
    """What is predicted: one whole of N tokens of a kind, its exact V and V_1, and the population's
    expectation of V(N) and V_1(N) when it comes from a simulated population (NaN otherwise)."""

    name: str
    kind: str
    tokens: int
    types: int
    hapaxes: int
    expected_types: float = float("nan")
    expected_hapaxes: float = float("nan")
    population_types: float = float("nan")
    passages: int = 0
    passage_median_tokens: float = float("nan")


@dataclass(frozen=True)
class Case:
    """One sample of a whole to fit on: ``draw`` 1..K for random samples, 0 for the text-order prefix."""

    whole: Whole
    fraction: float
    draw: int
    sample: Spectrum


def whole_of(name: str, kind: str, spectrum: Spectrum, **extra: float) -> Whole:
    return Whole(name, kind, spectrum.tokens, spectrum.types, spectrum.hapaxes, **extra)


def simulated_cases(
    population: Population, fractions: Sequence[float], states: int
) -> tuple[Whole, list[Case]]:
    """The population's whole (one seeded draw of N tokens) and its K random samples per fraction."""
    ids = population.whole(generator(population.name))
    source, N = population.source, population.tokens
    whole = whole_of(
        population.name,
        population.kind,
        spectrum_of(ids),
        expected_types=source.expected_types(N),
        expected_hapaxes=source.expected_hapaxes(N),
        population_types=source.population_types,
    )
    cases = [
        Case(
            whole,
            f,
            state,
            spectrum_of(random_sample(ids, round(f * N), generator(population.name, f, state))),
        )
        for f in fractions
        for state in range(1, states + 1)
    ]
    return whole, cases


def book_cases(
    name: str, ids: np.ndarray, fractions: Sequence[float], states: int
) -> tuple[Whole, list[Case]]:
    """A long book: K random samples per fraction (numpy Generator per random state 1..K) and the prefix."""
    whole = whole_of(name, BOOKS, spectrum_of(ids))
    cases = []
    for f in fractions:
        n = round(f * ids.size)
        cases += [
            Case(whole, f, state, spectrum_of(random_sample(ids, n, np.random.default_rng(state))))
            for state in range(1, states + 1)
        ]
        cases.append(Case(whole, f, 0, spectrum_of(ids[:n])))
    return whole, cases


def collection_cases(
    name: str, ids: np.ndarray, bounds: np.ndarray, fractions: Sequence[float], states: int
) -> tuple[Whole, list[Case]]:
    """A book as a collection of passages: K samples of round(F P) whole passages (at least one) per
    fraction."""
    passages = bounds.size - 1
    whole = whole_of(
        name,
        COLLECTIONS,
        spectrum_of(ids),
        passages=passages,
        passage_median_tokens=float(np.median(np.diff(bounds))),
    )
    cases = [
        Case(
            whole,
            f,
            state,
            spectrum_of(passage_sample(ids, bounds, max(1, round(f * passages)), generator(name, f, state))),
        )
        for f in fractions
        for state in range(1, states + 1)
    ]
    return whole, cases


# --- evaluation ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Outcome:
    """One predictor on one sample, at the whole's size N: signed % errors of V and V_1 (NaN where the
    fit failed or V_1 is not measured), whether the nominal 90% range of V holds the true V, its half-width
    in % of the prediction, whether an end of it lies below the sample's V, and the impossible outputs
    at every size checked. ``failure`` says why there is no prediction."""

    types_error: float
    hapax_error: float
    covered: bool
    half_width: float
    range_below_sample: bool
    impossible: Counter[str] = field(default_factory=Counter)
    failure: str | None = None

    @property
    def predicted(self) -> bool:
        return self.failure is None


@dataclass(frozen=True)
class CaseResult:
    """Every predictor's outcome on one case, the types weights of the recommendation (empty when the
    backtest refused the sample) and the impossible outputs of the unseen-vocabulary estimates."""

    case: Case
    outcomes: dict[str, Outcome]
    weights: dict[str, float]
    unseen: Counter[str]

    @property
    def impossible(self) -> int:
        """Every impossible output of this sample: all predictors and the unseen estimates."""
        return sum(sum(o.impossible.values()) for o in self.outcomes.values()) + sum(self.unseen.values())


def failed(reason: str) -> Outcome:
    nan = float("nan")
    return Outcome(nan, nan, False, nan, False, Counter(), reason)


def outcome(predictor: Anchored, case: Case) -> Outcome:
    """One predictor's outcome on one case (``Outcome``)."""
    whole, sample = case.whole, case.sample
    N = whole.tokens
    types = float(predictor.types(N))
    hapaxes = float(predictor.spectrum(N, 1)[0])
    low, high = float(predictor.types_low(N)), float(predictor.types_high(N))
    sizes = {float(N), *(factor * sample.tokens for factor in CHECK_FACTORS)}
    impossible = prediction_problems(predictor, sample.types, sizes)
    return Outcome(
        100 * (types / whole.types - 1),
        100 * (hapaxes / whole.hapaxes - 1) if whole.hapaxes >= MIN_HAPAXES else float("nan"),
        bool(low <= whole.types <= high),
        100 * (high - low) / 2 / types,
        bool(min(low, high) < sample.types * (1 - 1e-9)),
        impossible,
    )


def evaluate(case: Case) -> CaseResult:
    """Fit everything on the case's sample as the modelling service does and check it at N."""
    sample = case.sample
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        unseen = unseen_problems(unseen_summary(sample))
        try:
            report = backtest(sample)
        except ValueError as exc:
            return CaseResult(case, {name: failed(str(exc)) for name in PREDICTORS}, {}, unseen)
        predictors = {**report.fitted, RECOMMENDED: report.recommended}
        outcomes = {}
        for name in PREDICTORS:
            if name not in predictors:
                outcomes[name] = failed(report.failures.get(name, "not fitted"))
                continue
            try:
                outcomes[name] = outcome(Anchored(predictors[name], sample), case)
            except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
                outcomes[name] = failed(f"prediction refused: {exc}")
        weights = report.recommended.as_dict()["weights"]
    return CaseResult(case, outcomes, {name: w["types"] for name, w in weights.items()}, unseen)


def evaluate_all(cases: Sequence[Case], jobs: int) -> list[CaseResult]:
    """Every case, in order, on ``jobs`` processes; progress on standard error."""
    results = []
    started = time.perf_counter()
    with ProcessPoolExecutor(jobs) if jobs > 1 else contextlib.nullcontext() as pool:
        mapped = pool.map(evaluate, cases) if pool else map(evaluate, cases)
        for i, result in enumerate(mapped, start=1):
            results.append(result)
            if i % 10 == 0 or i == len(cases):
                elapsed = time.perf_counter() - started
                print(f"{i}/{len(cases)} samples fitted, {elapsed:.0f} s", file=sys.stderr, flush=True)
    return results


# --- summaries ----------------------------------------------------------------------------------------


def random_draws(results: Iterable[CaseResult], kind: str, fraction: float) -> list[CaseResult]:
    return [r for r in results if r.case.whole.kind == kind and r.case.fraction == fraction and r.case.draw]


def _finite(values: Iterable[float]) -> np.ndarray:
    values = np.asarray(list(values), dtype=float)
    return values[~np.isnan(values)]


@dataclass(frozen=True)
class Summary:
    """One predictor over the random samples of one kind at one fraction (module docstring)."""

    samples: int
    refused: int
    types_median: float
    types_worst: float
    types_worst_bias: float
    hapax_median: float
    hapax_worst: float
    hapax_worst_bias: float
    coverage: float
    half_width: float
    range_below_sample: int
    impossible: int


def summarise(draws: Sequence[CaseResult], name: str) -> Summary:
    """``Summary`` of predictor ``name``: medians and maxima over the samples it predicted, worst per-whole
    bias over the wholes, coverage among the predictions made (NaN where there is nothing to summarise)."""
    outcomes = [d.outcomes[name] for d in draws]
    made = [o for o in outcomes if o.predicted]
    types = np.abs(_finite(o.types_error for o in made))
    hapaxes = np.abs(_finite(o.hapax_error for o in made))
    by_whole: dict[str, list[Outcome]] = {}
    for d in draws:
        by_whole.setdefault(d.case.whole.name, []).append(d.outcomes[name])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # a whole without finite errors: NaN
        biases = np.array(
            [
                (np.nanmean([o.types_error for o in mine]), np.nanmean([o.hapax_error for o in mine]))
                for mine in by_whole.values()
            ]
        ).reshape(-1, 2)

    def stat(f, values: np.ndarray) -> float:
        values = _finite(values)
        return float(f(values)) if values.size else float("nan")

    return Summary(
        len(outcomes),
        len(outcomes) - len(made),
        stat(np.median, types),
        stat(np.max, types),
        stat(np.max, np.abs(biases[:, 0])),
        stat(np.median, hapaxes),
        stat(np.max, hapaxes),
        stat(np.max, np.abs(biases[:, 1])),
        100 * float(np.mean([o.covered for o in made])) if made else float("nan"),
        stat(np.median, np.array([o.half_width for o in made])),
        sum(o.range_below_sample for o in made),
        sum(sum(o.impossible.values()) for o in outcomes),
    )


# --- targets ------------------------------------------------------------------------------------------

TARGET_FRACTION = 0.1


@dataclass(frozen=True)
class Check:
    """One target on one kind: the measured figure as shown, and whether it is met (None: no target)."""

    shown: str
    met: bool | None

    def cell(self) -> str:
        return self.shown if self.met is None else f"{self.shown} {'met' if self.met else '**missed**'}"


def target_checks(results: Sequence[CaseResult], kind: str) -> dict[str, Check]:
    """The recommendation at 10x on one kind against the targets (``TARGETS``)."""
    draws = random_draws(results, kind, TARGET_FRACTION)
    if not draws:
        return {}
    natural = kind in NATURAL_KINDS
    rec = summarise(draws, RECOMMENDED)
    singles = {name: summarise(draws, name) for name in MODELS}

    def best(attribute: str) -> tuple[str, float]:
        scored = [
            (getattr(s, attribute), name) for name, s in singles.items() if np.isfinite(getattr(s, attribute))
        ]
        value, name = min(scored) if scored else (float("nan"), "none")
        return name, value

    def bound(value: float, limit: float) -> Check:
        return Check(_number(value), bool(value <= limit) if np.isfinite(value) else None)

    def versus(attribute: str) -> Check:
        name, value = best(attribute)
        gap = getattr(rec, attribute) - value
        if not np.isfinite(gap):
            return Check("n/a", None)
        return Check(f"{gap:+.2f} (best: {name} {_number(value)})", bool(gap <= 1))

    everything = sum(d.impossible for d in draws)
    return {
        "V": bound(rec.types_median, 3 if natural else 5),
        "V_1": bound(rec.hapax_median, 6 if natural else 8),
        "V vs best": versus("types_median"),
        "V_1 vs best": versus("hapax_median"),
        "coverage": coverage_check(rec),
        "below": Check(
            f"{rec.range_below_sample}/{rec.samples - rec.refused}",
            rec.range_below_sample == 0 if rec.samples > rec.refused else None,
        ),
        "half-width": Check(
            _number(rec.half_width),
            bool(rec.half_width <= 10) if natural and np.isfinite(rec.half_width) else None,
        ),
        "impossible": Check(f"{rec.impossible} / {everything}", everything == 0),
        "refused": Check(f"{rec.refused}/{rec.samples}", None),
    }


def coverage_check(rec: Summary) -> Check:
    """The coverage with its count and the exact (Clopper-Pearson) 95% confidence interval of the true
    coverage (``scipy.stats.binomtest``): with a few dozen samples a miss of the 85-95% band may be chance."""
    answered = rec.samples - rec.refused
    if not answered:
        return Check("n/a", None)
    held = round(rec.coverage * answered / 100)
    interval = stats.binomtest(held, answered).proportion_ci(confidence_level=0.95)
    shown = f"{_percent(rec.coverage)} ({held}/{answered}; 95% CI {interval.low:.0%}-{interval.high:.0%})"
    return Check(shown, bool(85 <= rec.coverage <= 95))


TARGETS = (
    ("V", "median abs error of V, %", "<= 5 (natural texts <= 3)"),
    ("V_1", "median abs error of V_1, %", "<= 8 (natural texts <= 6)"),
    ("V vs best", "V: recommended minus the best single model, points", "<= +1"),
    ("V_1 vs best", "V_1: recommended minus the best single model, points", "<= +1"),
    ("coverage", "90% ranges of V holding the truth", "85-95%"),
    ("below", "ranges with an end below the sample's V", "0"),
    ("half-width", "median half-width of the 90% range, %", "<= 10 on natural texts"),
    ("impossible", "impossible outputs: recommended / everything", "0"),
    ("refused", "samples the core refused to fit", ""),
)


# --- rendering ----------------------------------------------------------------------------------------


def _number(value: float, signed: bool = False) -> str:
    if np.isnan(value):
        return "n/a"
    if np.isinf(value):
        return "inf" if value > 0 else "-inf"
    return f"{value:+.2f}" if signed else f"{value:.2f}"


def _percent(value: float) -> str:
    return "n/a" if np.isnan(value) else f"{value:.0f}%"


def _row(cells: Sequence[str]) -> str:
    return "| " + " | ".join(cells) + " |"


def _table(header: Sequence[str], rows: Iterable[Sequence[str]]) -> list[str]:
    return [_row(header), _row(["---"] * len(header)), *map(_row, rows)]


SUMMARY_HEADER = (
    "predictor",
    "samples",
    "refused",
    "V median",
    "V worst",
    "V worst bias",
    "V_1 median",
    "V_1 worst",
    "V_1 worst bias",
    "90% coverage",
    "median half-width",
    "range end < seen V",
    "impossible",
)


def summary_cells(name: str, s: Summary) -> list[str]:
    return [
        f"**{name}**" if name == RECOMMENDED else name,
        str(s.samples),
        str(s.refused),
        _number(s.types_median),
        _number(s.types_worst),
        _number(s.types_worst_bias),
        _number(s.hapax_median),
        _number(s.hapax_worst),
        _number(s.hapax_worst_bias),
        _percent(s.coverage),
        _number(s.half_width),
        str(s.range_below_sample),
        str(s.impossible),
    ]


def kinds_present(results: Sequence[CaseResult]) -> list[str]:
    present = {r.case.whole.kind for r in results}
    return [kind for kind in KINDS if kind in present]


def render_targets(results: Sequence[CaseResult]) -> list[str]:
    kinds = kinds_present(results)
    checks = {kind: target_checks(results, kind) for kind in kinds}
    if not any(checks.values()):
        return ["## Targets at 10x", "", f"Not evaluated: the fraction {TARGET_FRACTION:g} was not run.", ""]
    return [
        "## Targets for the recommendation at 10x (fitted on 10%), measured",
        "",
        'Median over the random samples of each kind; "best single model" is the model of `MODELS` with the '
        "smallest median on that kind; impossible outputs are counted at N and at 2, 4, 10 and 100 times the "
        "sample's size, for the recommendation alone / for every predictor and the unseen estimates. "
        f"V_1 is n/a where the wholes have fewer than {MIN_HAPAXES} hapax legomena (closed lists seen "
        "whole).",
        "",
        *_table(
            ["target", "wanted", *kinds],
            (
                [label, wanted, *(checks[k][key].cell() if checks[k] else "n/a" for k in kinds)]
                for key, label, wanted in TARGETS
            ),
        ),
        "",
    ]


def render_summaries(results: Sequence[CaseResult], fractions: Sequence[float]) -> list[str]:
    lines = []
    for fraction in fractions:
        lines += [
            f"## Summary from {fraction:.0%} ({1 / fraction:g}x), per kind: absolute errors at N, %",
            "",
            "median / worst: of |100 (predicted - true) / true| over the random samples the predictor "
            "answered; worst bias: the largest |mean signed error| over one whole's samples; coverage: share "
            "of the answered samples whose nominal 90% range of V holds the true V; half-width in % of the "
            "prediction; range end < seen V: samples whose range at N has an end below the sample's own V; "
            "impossible: impossible outputs of the predictor at every size checked (breakdown below).",
            "",
        ]
        for kind in kinds_present(results):
            draws = random_draws(results, kind, fraction)
            if not draws:
                continue
            wholes = len({d.case.whole.name for d in draws})
            lines += [
                f"### {kind}, from {fraction:.0%} ({wholes} wholes, {len(draws)} samples)",
                "",
                *_table(SUMMARY_HEADER, (summary_cells(name, summarise(draws, name)) for name in PREDICTORS)),
                "",
            ]
    return lines


def render_impossible(results: Sequence[CaseResult]) -> list[str]:
    kinds = kinds_present(results)
    counts = {kind: Counter() for kind in kinds}
    samples = Counter()
    for r in results:
        kind = r.case.whole.kind
        samples[kind] += 1
        counts[kind].update(r.unseen)
        for o in r.outcomes.values():
            counts[kind].update(o.impossible)
    rows = [[category, *(str(counts[k][category]) for k in kinds)] for category in CATEGORIES]
    rows.append(["samples checked (every fraction, prefixes included)", *(str(samples[k]) for k in kinds)])
    return [
        "## Impossible outputs by category (every predictor, every fraction)",
        "",
        f"Each predictor is checked at N and at {', '.join(map(str, CHECK_FACTORS))} times the sample's size "
        "(each category at most once per size); the unseen-vocabulary estimates once per sample. "
        f'"{RANGE_BELOW_SAMPLE}" counts either end of a range.',
        "",
        *_table(["category", *kinds], rows),
        "",
    ]


def render_weights(results: Sequence[CaseResult], fractions: Sequence[float]) -> list[str]:
    kinds = kinds_present(results)
    lines = [
        "## Weights of the models in the recommendation (weights of V)",
        "",
        "mean weight over the samples the recommendation answered (k/n: samples where the model's weight "
        "was above 0).",
        "",
    ]
    for fraction in fractions:
        cells = {}
        for kind in kinds:
            draws = [d for d in random_draws(results, kind, fraction) if d.weights]
            for name in MODELS:
                w = np.array([d.weights.get(name, 0.0) for d in draws])
                cells[kind, name] = f"{w.mean():.2f} ({np.count_nonzero(w)}/{w.size})" if w.size else "n/a"
        lines += [
            f"### From {fraction:.0%}",
            "",
            *_table(["model", *kinds], ([name, *(cells[k, name] for k in kinds)] for name in MODELS)),
            "",
        ]
    return lines


def render_wholes(wholes: Sequence[Whole]) -> list[str]:
    simulated = [w for w in wholes if w.kind in SIMULATED_KINDS]
    books = [w for w in wholes if w.kind == BOOKS]
    collections = [w for w in wholes if w.kind == COLLECTIONS]
    lines = []
    if simulated:
        lines += [
            "## Simulated populations (`benchmarks/populations.py`)",
            "",
            "N: tokens of the whole (one seeded draw); V, V_1: the whole's, the truth predicted; E[V(N)], "
            "E[V_1(N)]: the population's exact expectations; S: types of the population.",
            "",
            *_table(
                ["population", "kind", "N", "V", "E[V(N)]", "V_1", "E[V_1(N)]", "S"],
                (
                    [
                        w.name,
                        w.kind,
                        f"{w.tokens:,}",
                        f"{w.types:,}",
                        f"{w.expected_types:,.1f}",
                        f"{w.hapaxes:,}",
                        f"{w.expected_hapaxes:,.1f}",
                        "infinite" if np.isinf(w.population_types) else f"{w.population_types:,.0f}",
                    ]
                    for w in simulated
                ),
            ),
            "",
        ]
    if books:
        lines += [
            f"## Texts ({len(books)}; default tokenization profile)",
            "",
            *_table(
                ["text", "tokens N", "types V", "hapaxes V_1"],
                ([w.name, f"{w.tokens:,}", f"{w.types:,}", f"{w.hapaxes:,}"] for w in books),
            ),
            "",
        ]
    if collections:
        lines += [
            "## Short-text collections (built from the books above)",
            "",
            f"Each book cut at paragraph boundaries into passages of at least {PASSAGE_TOKENS} tokens "
            "(paragraphs joined in order); samples are whole passages drawn at random. These are not real "
            "collections of short texts: they are books in pieces, so their passages share one author, topic "
            "and style.",
            "",
            *_table(
                ["collection", "passages", "median passage tokens", "tokens N", "types V"],
                (
                    [
                        w.name,
                        f"{w.passages:,}",
                        f"{w.passage_median_tokens:,.0f}",
                        f"{w.tokens:,}",
                        f"{w.types:,}",
                    ]
                    for w in collections
                ),
            ),
            "",
        ]
    return lines


ERROR_COLUMNS = ("V bias", "V_1 bias", "V prefix", "V_1 prefix", "V in 90% range")


def render_per_whole(results: Sequence[CaseResult], fractions: Sequence[float]) -> list[str]:
    """Per whole and predictor: the mean signed error over its random samples (bias), the text-order
    prefix for books, and how many of its ranges held the truth."""
    lines = []
    for fraction in fractions:
        here = [r for r in results if r.case.fraction == fraction]
        wholes = list(dict.fromkeys((r.case.whole.kind, r.case.whole.name) for r in here))
        rows = []
        for kind, name in wholes:
            mine = [r for r in here if r.case.whole.name == name and r.case.whole.kind == kind]
            draws = [r for r in mine if r.case.draw]
            prefix = next((r for r in mine if not r.case.draw), None)
            for predictor in PREDICTORS:
                outs = [d.outcomes[predictor] for d in draws]
                made = [o for o in outs if o.predicted]
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore", RuntimeWarning)
                    bias = [float(np.nanmean([o.types_error for o in made])) if made else np.nan]
                    bias.append(float(np.nanmean([o.hapax_error for o in made])) if made else np.nan)
                p = prefix.outcomes[predictor] if prefix else None
                rows.append(
                    [
                        kind,
                        name,
                        predictor,
                        _number(bias[0], True),
                        _number(bias[1], True),
                        _number(p.types_error, True) if p else "",
                        _number(p.hapax_error, True) if p else "",
                        f"{sum(o.covered for o in made)}/{len(outs)}",
                    ]
                )
        lines += [
            f"## Extrapolation from {fraction:.0%} ({1 / fraction:g}x) per whole: signed error, %",
            "",
            f"bias: mean over the random samples of round({fraction:g} N) tokens (whole passages for the "
            f"collections); prefix: the first round({fraction:g} N) tokens of a book; range: samples whose "
            "nominal 90% range of V holds the true V (of all samples, refused ones included).",
            "",
            *_table(["kind", "whole", "predictor", *ERROR_COLUMNS], rows),
            "",
        ]
    return lines


# --- interpolation check (long books) -----------------------------------------------------------------


@dataclass(frozen=True)
class InterpolationCheck:
    """Exact E[V(n)] and the mean and standard error of V over random samples of n tokens."""

    tokens: int
    exact: float
    simulated: float
    standard_error: float

    @property
    def error(self) -> float:
        """100 (exact - simulated) / simulated."""
        return 100 * (self.exact / self.simulated - 1)

    @property
    def standard_error_percent(self) -> float:
        return 100 * self.standard_error / self.simulated


def interpolation_check(
    ids: np.ndarray, spectrum: Spectrum, n: int, rng: np.random.Generator
) -> InterpolationCheck:
    """Exact E[V(n)] of the spectrum and V of MONTE_CARLO_SAMPLES random samples of n tokens of ``ids``."""
    types = [np.unique(random_sample(ids, n, rng)).size for _ in range(MONTE_CARLO_SAMPLES)]
    sd = float(np.std(types, ddof=1))
    return InterpolationCheck(n, expected_types(spectrum, n), float(np.mean(types)), sd / np.sqrt(len(types)))


def interpolation_checks(ids: np.ndarray) -> tuple[InterpolationCheck, ...]:
    full, rng = spectrum_of(ids), np.random.default_rng(0)
    return tuple(interpolation_check(ids, full, round(s * ids.size), rng) for s in INTERPOLATION_SHARES)


def render_interpolation(checks: dict[str, tuple[InterpolationCheck, ...]]) -> list[str]:
    if not checks:
        return []
    rows = [
        [name, *(f"{c.error:+.3f} ± {c.standard_error_percent:.3f}" for c in found)]
        for name, found in checks.items()
    ]
    medians = [
        np.median([found[i].error for found in checks.values()]) for i in range(len(INTERPOLATION_SHARES))
    ]
    rows.append(["median", *(f"{m:+.3f}" for m in medians)])
    return [
        f"## Interpolation check: exact E[V(n)] vs the mean of {MONTE_CARLO_SAMPLES} random samples, %",
        "",
        "100 (exact - simulated) / simulated ± the standard error of the simulated mean (in % of it).",
        "",
        *_table(["text", *(f"{s:.0%} of N" for s in INTERPOLATION_SHARES)], rows),
        "",
    ]


# --- the run ------------------------------------------------------------------------------------------


def machine() -> str:
    load = ", ".join(f"{x:.1f}" for x in os.getloadavg())
    return (
        f"{platform.platform()} ({platform.machine()}, {os.cpu_count()} CPUs, load average at start {load}); "
        f"Python {platform.python_version()}, numpy {np.__version__}, scipy {scipy.__version__}"
    )


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        description="Extrapolation accuracy on simulated populations of known truth and on a folder of texts."
    )
    parser.add_argument("directory", type=Path, nargs="?", help="folder of .txt files (books)")
    parser.add_argument(
        "--states", type=int, help="random samples per whole and fraction (default 8, --quick 2)"
    )
    parser.add_argument("--fractions", default="0.1,0.25", help="shares fitted on (default 0.1,0.25)")
    parser.add_argument("--kinds", default=",".join(KINDS), help=f"comma-separated, of: {', '.join(KINDS)}")
    parser.add_argument(
        "--quick",
        action="store_true",
        help=f"2 samples per whole, the first population of each simulated kind, the {QUICK_TEXTS} smallest "
        "texts",
    )
    parser.add_argument("--jobs", type=int, default=1, help="processes fitting samples (default 1)")
    args = parser.parse_args(argv)
    fractions = [float(f) for f in args.fractions.split(",")]
    kinds = [k.strip() for k in args.kinds.split(",") if k.strip()]
    states = args.states if args.states is not None else 2 if args.quick else DEFAULT_STATES
    if not all(0 < f < 1 for f in fractions) or states < 1 or args.jobs < 1:
        parser.error("every fraction must lie strictly between 0 and 1; --states and --jobs must be positive")
    if unknown := set(kinds) - set(KINDS):
        parser.error(f"unknown kinds {sorted(unknown)} (use: {', '.join(KINDS)})")
    paths: list[Path] = []
    notes = []
    if any(k in NATURAL_KINDS for k in kinds):
        if args.directory is None:
            kinds = [k for k in kinds if k not in NATURAL_KINDS]
            notes.append("no folder of texts given: books and collections left out")
        else:
            paths = sorted(args.directory.glob("*.txt"))
            if not paths:
                parser.error(f"no .txt files in {args.directory}")
            if args.quick:
                paths = sorted(sorted(paths, key=lambda p: p.stat().st_size)[:QUICK_TEXTS])
    started = time.perf_counter()

    wholes: list[Whole] = []
    cases: list[Case] = []
    chosen = [p for p in populations() if p.kind in kinds]
    if args.quick:
        chosen = [next(p for p in chosen if p.kind == kind) for kind in SIMULATED_KINDS if kind in kinds]
    for population in chosen:
        whole, found = simulated_cases(population, fractions, states)
        wholes.append(whole)
        cases += found
    checks = {}
    for path in paths:
        body = read_body(path)
        ids = token_ids_of(path.name, body)
        if BOOKS in kinds:
            whole, found = book_cases(path.stem, ids, fractions, states)
            wholes.append(whole)
            cases += found
            checks[path.stem] = interpolation_checks(ids)
        if COLLECTIONS in kinds:
            whole, found = collection_cases(path.stem, ids, passage_bounds(body, ids.size), fractions, states)
            wholes.append(whole)
            cases += found
    results = evaluate_all(cases, args.jobs)
    elapsed = time.perf_counter() - started

    texts = f"{len(paths)} texts" + (f" (the {QUICK_TEXTS} smallest files)" if args.quick and paths else "")
    settings = "; ".join(
        [
            *(["quick mode"] if args.quick else []),
            f"random samples per whole and fraction: {states}",
            f"fractions {', '.join(f'{f:g}' for f in fractions)}",
            f"kinds: {', '.join(kinds)}",
            f"{len(chosen)} simulated populations, {texts}",
            f"{len(cases)} samples fitted on {args.jobs} process(es)",
            f"passages of at least {PASSAGE_TOKENS} tokens",
            f"V_1 errors where the whole has at least {MIN_HAPAXES} hapax legomena",
            *notes,
        ]
    )
    lines = [
        "# Lexigrowth accuracy benchmark",
        "",
        f"machine: {machine()}",
        "",
        f"settings: {settings}",
        "",
        *(f"- {kind}: {KIND_MEANINGS[kind]}" for kind in kinds),
        "",
        f"run time: {elapsed:.1f} s",
        "",
        *render_targets(results),
        *render_summaries(results, fractions),
        *render_impossible(results),
        *render_weights(results, fractions),
        *render_wholes(wholes),
        *render_per_whole(results, fractions),
        *render_interpolation(checks),
    ]
    print("\n".join(lines).rstrip())
    return 0


if __name__ == "__main__":
    sys.exit(main())
