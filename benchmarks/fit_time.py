"""Fit time: every vocabulary model, and the full model report (fits + backtests + recommended), for corpora
of 10^4 to 10^7 tokens.

Usage: ``python benchmarks/fit_time.py [--sizes 1e4,1e5,1e6,1e7] [--repeat 3]``

Each corpus is a multinomial sample (numpy, fixed seed) of n tokens from a Zipf-Mandelbrot population of
2 million types, p_i proportional to (i + 2.7)^-1.1: the spectrum of a large, text-like corpus without
reading one. For each size the table gives the CPU time in milliseconds (``time.process_time``, the
fastest of ``--repeat`` runs) of fitting each model once to the full spectrum, and of
``app.core.backtest.backtest`` (what the modelling service runs once per corpus and caches: every model on
the corpus and on 6 x 3 random thinnings, the recommended ensemble and 24 bootstrap replicates), once with
the refits warm-started from the full-corpus fit (as the service runs it) and once cold, from every
initial guess (as before warm starts); and the ratio of each time to that of the smallest size measured in
the same run, so that the growth with corpus size reads off directly.
"""

from __future__ import annotations

import argparse
import platform
import time
from functools import partial

import numpy as np

from app.core.backtest import backtest
from app.core.models import MODELS
from app.core.spectrum import Spectrum

POPULATION = 2_000_000
SHIFT, EXPONENT = 2.7, 1.1
SEED = 20261202


def sample_spectrum(tokens: int, rng: np.random.Generator) -> Spectrum:
    """The spectrum of a multinomial sample of ``tokens`` tokens from the population above."""
    weights = (np.arange(1, POPULATION + 1) + SHIFT) ** -EXPONENT
    counts = rng.multinomial(tokens, weights / weights.sum())
    return Spectrum.from_frequencies(counts[counts > 0])


def cpu_seconds(task, repeat: int) -> float:
    best = float("inf")
    for _ in range(repeat):
        start = time.process_time()
        task()
        best = min(best, time.process_time() - start)
    return best


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="1e4,1e5,1e6,1e7")
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args(argv)
    sizes = [int(float(s)) for s in args.sizes.split(",")]
    rng = np.random.default_rng(SEED)
    columns = [*MODELS, "model report", "model report (cold)"]
    rows = []
    for tokens in sizes:
        spectrum = sample_spectrum(tokens, rng)
        times = {
            name: cpu_seconds(partial(model.fit, spectrum), args.repeat) for name, model in MODELS.items()
        }
        times["model report"] = cpu_seconds(partial(backtest, spectrum), args.repeat)
        times["model report (cold)"] = cpu_seconds(partial(backtest, spectrum, warm_start=False), args.repeat)
        rows.append((tokens, spectrum.types, times))

    print(
        f"Machine: {platform.processor() or platform.machine()}, Python {platform.python_version()}, "
        f"numpy {np.__version__}; CPU milliseconds, fastest of {args.repeat}; "
        f"(x) = ratio to {sizes[0]:,} tokens.\n"
    )
    print("| tokens | types | " + " | ".join(columns) + " |")
    print("| ---: | ---: | " + " | ".join("---:" for _ in columns) + " |")
    base = rows[0][2]
    for tokens, types, times in rows:
        cells = [f"{1000 * times[c]:.1f} ({times[c] / base[c]:.1f}x)" for c in columns]
        print(f"| {tokens:,} | {types:,} | " + " | ".join(cells) + " |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
