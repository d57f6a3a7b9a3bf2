"""Accuracy benchmark: how well every model (and the recommended ensemble) extrapolates real texts.

Usage: ``python benchmarks/accuracy.py DIR [--states K] [--fraction F]``

For every ``.txt`` file in DIR (a Project Gutenberg header and licence, when both the ``*** START OF`` and
``*** END OF`` markers are present, are cut off first; ``***START OF`` also counts), the text is tokenized
by the ingestion service with the default profile, exactly as an upload would be. Then:

1. Extrapolation. Every model of ``MODELS`` and the ``recommended`` ensemble (``app.core.backtest``, the
   same call the modelling service makes) is fitted on
   - K random samples of round(F N) tokens (drawn without replacement from the token sequence, one numpy
     Generator per random state 1..K), and on
   - the first round(F N) tokens of the text (the text-order prefix),
   and predicts V and V_1 at the full size N (an extrapolation by the factor 1 / F). The table gives the
   signed errors 100 (predicted - observed) / observed in percent, the random ones averaged over the K
   states, and per model the median and mean absolute error across texts.
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
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy

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
ERROR_COLUMNS = ("V random", "V prefix", "V_1 random", "V_1 prefix")

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


def prediction_errors(part: Spectrum, full: Spectrum) -> dict[str, tuple[float, float]]:
    """Signed % errors of (V, V_1) at the full size for every model and the ensemble fitted on ``part``
    (NaN where a fit failed)."""
    N = full.tokens
    nan = (float("nan"), float("nan"))
    try:
        report = backtest(part)
    except ValueError:
        return dict.fromkeys(PREDICTORS, nan)
    predictors = {**report.fitted, RECOMMENDED: report.recommended}
    errors = {}
    for name in PREDICTORS:
        if name not in predictors:
            errors[name] = nan
            continue
        with np.errstate(all="ignore"):
            types = float(predictors[name].types(N))
            hapaxes = float(predictors[name].spectrum(N, 1)[0])
        errors[name] = (100 * (types / full.types - 1), 100 * (hapaxes / full.hapaxes - 1))
    return errors


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
    """One text: its size, the extrapolation errors per predictor and the interpolation checks.

    ``random`` holds one {predictor: (V error, V_1 error)} per random state, ``prefix`` the text-order fit.
    """

    name: str
    tokens: int
    types: int
    hapaxes: int
    random: tuple[dict[str, tuple[float, float]], ...]
    prefix: dict[str, tuple[float, float]]
    interpolation: tuple[InterpolationCheck, ...]

    def errors(self, name: str) -> tuple[float, float, float, float]:
        """(V random, V prefix, V_1 random, V_1 prefix): random errors averaged over the states."""
        random = np.nanmean([state[name] for state in self.random], axis=0) if self.random else (np.nan,) * 2
        return float(random[0]), self.prefix[name][0], float(random[1]), self.prefix[name][1]


def evaluate_text(path: Path, states: int, fraction: float) -> TextResult:
    ids = token_ids(path)
    full = spectrum_of(ids)
    n = round(fraction * ids.size)
    random = tuple(
        prediction_errors(spectrum_of(random_sample(ids, n, np.random.default_rng(state))), full)
        for state in range(1, states + 1)
    )
    rng = np.random.default_rng(0)
    checks = tuple(
        interpolation_check(ids, full, round(share * ids.size), rng) for share in INTERPOLATION_SHARES
    )
    return TextResult(
        path.stem,
        full.tokens,
        full.types,
        full.hapaxes,
        random,
        prediction_errors(spectrum_of(ids[:n]), full),
        checks,
    )


SUMMARY_HEADER = (
    "model",
    *(
        f"{column} {stat}"
        for column in ("V random", "V_1 random")
        for stat in ("median", "mean", "per sample")
    ),
    *(f"{column} {stat}" for column in ("V prefix", "V_1 prefix") for stat in ("median", "mean")),
)


def summary_row(results: Sequence[TextResult], name: str) -> list[str]:
    """One model's cells of the summary table (NaN errors, from failed fits, are left out)."""

    def stats(values: np.ndarray, per_sample: np.ndarray | None = None) -> list[str]:
        values = np.abs(values[np.isfinite(values)])
        cells = (
            [_cell(float(np.median(values)), False), _cell(float(np.mean(values)), False)]
            if values.size
            else ["n/a"] * 2
        )
        if per_sample is not None:
            finite = np.abs(per_sample[np.isfinite(per_sample)])
            cells.append(_cell(float(np.mean(finite)), False) if finite.size else "n/a")
        return cells

    per_text = np.array([r.errors(name) for r in results])
    samples = np.array([state[name] for r in results for state in r.random]).reshape(-1, 2)
    return [
        name,
        *stats(per_text[:, 0], samples[:, 0]),
        *stats(per_text[:, 2], samples[:, 1]),
        *stats(per_text[:, 1]),
        *stats(per_text[:, 3]),
    ]


def _cell(value: float, signed: bool = True) -> str:
    return "n/a" if not np.isfinite(value) else f"{value:+.2f}" if signed else f"{value:.2f}"


def _row(cells: Sequence[str]) -> str:
    return "| " + " | ".join(cells) + " |"


def _table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> list[str]:
    return [_row(header), _row(["---"] * len(header)), *map(_row, rows)]


def render(results: Sequence[TextResult], states: int, fraction: float) -> str:
    """The Markdown report: texts, extrapolation errors, their summary, and the interpolation check."""
    factor = 1 / fraction
    lines = [
        f"## Texts ({len(results)}; default tokenization profile)",
        "",
        *_table(
            ["text", "tokens N", "types V", "hapaxes V_1"],
            [[r.name, f"{r.tokens:,}", f"{r.types:,}", f"{r.hapaxes:,}"] for r in results],
        ),
        "",
        f"## Extrapolation from {fraction:.0%} of the tokens to N ({factor:g}x): signed error, %",
        "",
        f"random: mean over {states} random samples of round({fraction:g} N) tokens (without replacement); "
        f"prefix: the first round({fraction:g} N) tokens of the text.",
        "",
        *_table(
            ["text", "model", *ERROR_COLUMNS],
            [[r.name, name, *map(_cell, r.errors(name))] for r in results for name in PREDICTORS],
        ),
        "",
        f"## Absolute extrapolation error across the {len(results)} texts, % ({factor:g}x)",
        "",
        "median, mean: of the absolute error per text (random: of the mean signed error over the samples); "
        "per sample: mean absolute error over every random sample of every text.",
        "",
    ]
    lines += [*_table(SUMMARY_HEADER, [summary_row(results, name) for name in PREDICTORS]), ""]
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
        "--fraction", type=float, default=0.1, help="share of the tokens fitted on (default 0.1)"
    )
    args = parser.parse_args(argv)
    paths = sorted(args.directory.glob("*.txt"))
    if not paths:
        parser.error(f"no .txt files in {args.directory}")
    if not 0 < args.fraction < 1 or args.states < 1:
        parser.error("--fraction must lie strictly between 0 and 1 and --states must be positive")
    started = time.perf_counter()
    results = [evaluate_text(path, args.states, args.fraction) for path in paths]
    print("# Lexigrowth accuracy benchmark", "", f"machine: {machine()}", "", sep="\n")
    print(render(results, args.states, args.fraction))
    print(f"\nrun time: {time.perf_counter() - started:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
