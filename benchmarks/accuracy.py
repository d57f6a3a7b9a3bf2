"""Accuracy benchmark: how well every model (and the recommended ensemble) extrapolates real texts.

Usage: ``python benchmarks/accuracy.py DIR [--states K] [--fractions 0.1,0.25]``

For every ``.txt`` file in DIR (a Project Gutenberg header and licence, when both the ``*** START OF`` and
``*** END OF`` markers are present, are cut off first; ``***START OF`` also counts), the text is tokenized
by the ingestion service with the default profile, exactly as an upload would be. Then, for each
fraction F:

1. Extrapolation. ``app.core.backtest.backtest`` (the same call the modelling service makes: every model
   of ``MODELS``, the backtests and the ``recommended`` ensemble with its ranges) runs on
   - K random samples of round(F N) tokens (drawn without replacement from the token sequence, one numpy
     Generator per random state 1..K), and on
   - the first round(F N) tokens of the text (the text-order prefix),
   and every predictor predicts V and V_1 at the full size N (an extrapolation by the factor 1 / F), as the
   service does beyond the corpus size (continued from the sample, ``app.core.anchored``). Errors are
   signed, 100 (predicted - observed) / observed in percent. Per text: the bias (mean signed error over
   the K samples) and how many of the K nominal 90% ranges of V hold the observed V. Summary per
   predictor: median absolute error over every sample of every text, the largest per-text |bias|, the
   coverage of the 90% ranges and their median half-width (100 (high - low) / 2 / prediction).
2. Interpolation check. The exact random-sample formula E[V(n)] (``app.core.interpolation``, hypergeometric)
   against the mean V of 30 random samples of n tokens drawn without replacement, n = 5%, 20% and 50% of N:
   signed % difference per text with the standard error of the Monte Carlo mean, and the median across
   texts. The formula is exact, so the differences should be a few standard errors at most.

The output is Markdown, with the machine, the library versions and the run time.
"""

from __future__ import annotations

import argparse
import os
import platform
import re
import sys
import time
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy

from app.core.anchored import Anchored
from app.core.backtest import backtest
from app.core.interpolation import expected_types
from app.core.models import MODELS
from app.core.spectrum import Spectrum
from app.ingest.counting import count_sources
from app.ingest.profiles import get_profile
from app.ingest.readers import TextSource

RECOMMENDED = "recommended"
PREDICTORS = (*MODELS, RECOMMENDED)
INTERPOLATION_SHARES = (0.05, 0.2, 0.5)
MONTE_CARLO_SAMPLES = 30

_START = re.compile(r"^\*\*\* ?START OF[^\n]*\n?", re.MULTILINE)
_END = re.compile(r"^\*\*\* ?END OF", re.MULTILINE)


def strip_gutenberg(text: str) -> str:
    """The text between the Project Gutenberg start and end marker lines; the whole text without both."""
    start = _START.search(text)
    end = _END.search(text, start.end()) if start else None
    return text[start.end() : end.start()] if start and end else text


def token_ids(path: Path) -> np.ndarray:
    """Type id of every token of the file, in text order (default tokenization profile)."""
    body = strip_gutenberg(TextSource.from_path(path).read_text())
    with count_sources([TextSource.from_text(path.name, body)], get_profile("default")) as counted:
        return np.array(counted.type_ids())


def spectrum_of(ids: np.ndarray) -> Spectrum:
    """Frequency spectrum of a sequence of type ids."""
    counts = np.bincount(ids)
    return Spectrum.from_frequencies(counts[counts > 0])


def random_sample(ids: np.ndarray, n: int, rng: np.random.Generator) -> np.ndarray:
    """n tokens of the sequence drawn at random without replacement."""
    return ids[rng.choice(ids.size, size=n, replace=False)]


@dataclass(frozen=True)
class Outcome:
    """One predictor on one sample: signed % errors of V and V_1 at N, whether the 90% range of V holds
    the observed V, and the range's half-width in % of the prediction (NaN where the fit failed)."""

    types_error: float
    hapax_error: float
    covered: bool
    half_width: float


FAILED = Outcome(float("nan"), float("nan"), False, float("nan"))


def prediction_errors(part: Spectrum, full: Spectrum) -> dict[str, Outcome]:
    """The outcome of every model and of the ensemble fitted on ``part``, predicting at the full size."""
    N = full.tokens
    try:
        report = backtest(part)
    except ValueError:
        return dict.fromkeys(PREDICTORS, FAILED)
    predictors = {**report.fitted, RECOMMENDED: report.recommended}
    out = {}
    for name in PREDICTORS:
        if name not in predictors:
            out[name] = FAILED
            continue
        anchored = Anchored(predictors[name], part)
        with np.errstate(all="ignore"):
            types = float(anchored.types(N))
            hapaxes = float(anchored.spectrum(N, 1)[0])
            low, high = anchored.types_low(N), anchored.types_high(N)
        out[name] = Outcome(
            100 * (types / full.types - 1),
            100 * (hapaxes / full.hapaxes - 1),
            low <= full.types <= high,
            100 * (high - low) / 2 / types,
        )
    return out


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


@dataclass(frozen=True)
class TextResult:
    """One text: its size, the outcomes per fraction and predictor, and the interpolation checks.

    ``random[F]`` holds one {predictor: Outcome} per random state, ``prefix[F]`` the text-order fit.
    """

    name: str
    tokens: int
    types: int
    hapaxes: int
    random: dict[float, tuple[dict[str, Outcome], ...]]
    prefix: dict[float, dict[str, Outcome]]
    interpolation: tuple[InterpolationCheck, ...]

    def bias(self, fraction: float, name: str) -> tuple[float, float]:
        """Mean signed error of V and of V_1 over the random samples (failed fits left out)."""
        draws = np.array([(d[name].types_error, d[name].hapax_error) for d in self.random[fraction]])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            return tuple(map(float, np.nanmean(draws, axis=0)))

    def covered(self, fraction: float, name: str) -> int:
        return sum(d[name].covered for d in self.random[fraction])


def evaluate_text(path: Path, states: int, fractions: Sequence[float]) -> TextResult:
    ids = token_ids(path)
    full = spectrum_of(ids)
    random, prefix = {}, {}
    for fraction in fractions:
        n = round(fraction * ids.size)
        random[fraction] = tuple(
            prediction_errors(spectrum_of(random_sample(ids, n, np.random.default_rng(state))), full)
            for state in range(1, states + 1)
        )
        prefix[fraction] = prediction_errors(spectrum_of(ids[:n]), full)
    rng = np.random.default_rng(0)
    checks = tuple(
        interpolation_check(ids, full, round(share * ids.size), rng) for share in INTERPOLATION_SHARES
    )
    return TextResult(path.stem, full.tokens, full.types, full.hapaxes, random, prefix, checks)


ERROR_COLUMNS = ("V bias", "V_1 bias", "V prefix", "V_1 prefix", "V in 90% range")
SUMMARY_HEADER = (
    "model",
    "V median abs",
    "V_1 median abs",
    "V max text abs bias",
    "V_1 max text abs bias",
    "90% range coverage",
    "median half-width",
)


def summary_row(results: Sequence[TextResult], fraction: float, name: str) -> list[str]:
    """One predictor's cells of the summary table (NaN errors, from failed fits, are left out)."""
    draws = [d[name] for r in results for d in r.random[fraction]]
    types = np.abs([d.types_error for d in draws])
    hapaxes = np.abs([d.hapax_error for d in draws])
    biases = np.abs([r.bias(fraction, name) for r in results])
    widths = np.array([d.half_width for d in draws])

    def median(values: np.ndarray) -> str:
        values = values[np.isfinite(values)]
        return _cell(float(np.median(values)), False) if values.size else "n/a"

    def largest(values: np.ndarray) -> str:
        values = values[np.isfinite(values)]
        return _cell(float(np.max(values)), False) if values.size else "n/a"

    coverage = 100 * np.mean([d.covered for d in draws])
    return [
        name,
        median(types),
        median(hapaxes),
        largest(biases[:, 0]),
        largest(biases[:, 1]),
        f"{coverage:.0f}%",
        median(widths),
    ]


def _cell(value: float, signed: bool = True) -> str:
    return "n/a" if not np.isfinite(value) else f"{value:+.2f}" if signed else f"{value:.2f}"


def _row(cells: Sequence[str]) -> str:
    return "| " + " | ".join(cells) + " |"


def _table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> list[str]:
    return [_row(header), _row(["---"] * len(header)), *map(_row, rows)]


def render(results: Sequence[TextResult], states: int, fractions: Sequence[float]) -> str:
    """The Markdown report: texts, extrapolation errors per text and their summary for each fraction,
    and the interpolation check."""
    lines = [
        f"## Texts ({len(results)}; default tokenization profile)",
        "",
        *_table(
            ["text", "tokens N", "types V", "hapaxes V_1"],
            [[r.name, f"{r.tokens:,}", f"{r.types:,}", f"{r.hapaxes:,}"] for r in results],
        ),
        "",
    ]
    for fraction in fractions:
        factor = 1 / fraction
        lines += [
            f"## Extrapolation from {fraction:.0%} of the tokens to N ({factor:g}x): signed error, %",
            "",
            f"bias: mean over {states} random samples of round({fraction:g} N) tokens (without replacement); "
            f"prefix: the first round({fraction:g} N) tokens of the text; range: samples whose nominal 90% "
            "range of V holds the observed V.",
            "",
            *_table(
                ["text", "model", *ERROR_COLUMNS],
                [
                    [
                        r.name,
                        name,
                        *map(_cell, r.bias(fraction, name)),
                        _cell(r.prefix[fraction][name].types_error),
                        _cell(r.prefix[fraction][name].hapax_error),
                        f"{r.covered(fraction, name)}/{states}",
                    ]
                    for r in results
                    for name in PREDICTORS
                ],
            ),
            "",
            f"## Summary from {fraction:.0%} ({factor:g}x) across the {len(results)} texts, %",
            "",
            "median abs: of the absolute error over every random sample of every text; max text abs bias: "
            "the largest absolute per-text bias; coverage and median half-width of the nominal 90% range of V.",
            "",
            *_table(SUMMARY_HEADER, [summary_row(results, fraction, name) for name in PREDICTORS]),
            "",
        ]
    shares = [f"{share:.0%} of N" for share in INTERPOLATION_SHARES]
    rows = [
        [r.name, *(f"{c.error:+.3f} ± {c.standard_error_percent:.3f}" for c in r.interpolation)]
        for r in results
    ]
    medians = [
        np.median([r.interpolation[i].error for r in results]) for i in range(len(INTERPOLATION_SHARES))
    ]
    rows.append(["median", *(f"{m:+.3f}" for m in medians)])
    lines += [
        f"## Interpolation check: exact E[V(n)] vs the mean of {MONTE_CARLO_SAMPLES} random samples, %",
        "",
        "100 (exact - simulated) / simulated ± the standard error of the simulated mean (in % of it).",
        "",
        *_table(["text", *shares], rows),
    ]
    return "\n".join(lines)


def machine() -> str:
    return (
        f"{platform.platform()} ({platform.machine()}, {os.cpu_count()} CPUs); Python {platform.python_version()}, "
        f"numpy {np.__version__}, scipy {scipy.__version__}"
    )


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        description="Extrapolation and interpolation accuracy on a folder of texts."
    )
    parser.add_argument("directory", type=Path, help="folder of .txt files")
    parser.add_argument("--states", type=int, default=5, help="random samples per text (default 5)")
    parser.add_argument(
        "--fractions", default="0.1,0.25", help="shares of the tokens fitted on (default 0.1,0.25)"
    )
    args = parser.parse_args(argv)
    paths = sorted(args.directory.glob("*.txt"))
    if not paths:
        parser.error(f"no .txt files in {args.directory}")
    fractions = [float(f) for f in args.fractions.split(",")]
    if not all(0 < f < 1 for f in fractions) or args.states < 1:
        parser.error("every fraction must lie strictly between 0 and 1 and --states must be positive")
    started = time.perf_counter()
    results = [evaluate_text(path, args.states, fractions) for path in paths]
    print("# Lexigrowth accuracy benchmark", "", f"machine: {machine()}", "", sep="\n")
    print(render(results, args.states, fractions))
    print(f"\nrun time: {time.perf_counter() - started:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
