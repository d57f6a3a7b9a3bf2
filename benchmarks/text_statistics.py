"""Texts as the unit: calibration of the text-level tests, and the speed of keyness and dispersion across texts.

    .venv/bin/python benchmarks/text_statistics.py [--draws 400] [--texts 40] [--resamples 199]
        [--words 50000] [--speed-texts 400]     (--resamples: deals of the pooled permutation test)

Calibration: a collection of texts of one kind is split at random into two halves *by texts*, many times;
the halves differ by chance only, so a calibrated test at the 5% level flags about 5% of the splits. Per
draw, ``--texts`` texts are taken at random from a bank and dealt into two halves; reported are the share of
draws with p < 0.05 for Welch's t and the permutation test of the per-text E[V(n)] and for the permutation
test of the pooled E[V(n)], the share whose 90% range excludes 0 (nominal 10%) for Hedges' g and the
jackknife range of the pooled difference, and beside them the token-level z test of the pooled corpora
(``app.core.comparison``, with its population spread), which treats tokens as independent draws. Two banks: simulated texts with topic-clustered vocabularies
(``tests.core.text_collections``) and the paragraphs of standard-library docstrings (real English that no
one on this project wrote, as in the tests), each paragraph of at least 40 tokens a text.

Speed: ``text_keyness``, ``dispersion`` and ``compare_texts`` on ``--speed-texts`` texts over ``--words``
words (Zipf-Mandelbrot texts of 300 to 3,000 tokens), with scipy.stats.mannwhitneyu on the dense per-text
matrix beside them.
"""

from __future__ import annotations

import argparse
import re
import sys
import time
from pathlib import Path

import numpy as np
import scipy.sparse as sp
from scipy.stats import mannwhitneyu

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # this checkout's app and tests
from app.core.comparison import pairwise_z_tests, size_matched
from app.core.dispersion import dispersion
from app.core.spectrum import Spectrum
from app.core.text_keyness import text_keyness
from app.core.text_tests import (
    compare_texts,
    hedges_g,
    permutation_test,
    pooled_types_test,
    types_per_text,
    welch_test,
)
from tests.conftest import stdlib_docstrings
from tests.core.text_collections import topic_texts, zipf_weights


def docstring_paragraphs(min_tokens: int = 40) -> sp.csr_array:
    """Texts x words counts of the standard-library docstring paragraphs of at least ``min_tokens`` tokens."""
    paragraphs = [re.findall(r"[^\W\d_]+", p.lower()) for p in re.split(r"\n\s*\n", stdlib_docstrings())]
    paragraphs = [p for p in paragraphs if len(p) >= min_tokens]
    vocabulary, ids = np.unique(np.concatenate(paragraphs), return_inverse=True)
    text = np.repeat(np.arange(len(paragraphs)), [len(p) for p in paragraphs])
    return sp.csr_array(
        (np.ones(ids.size, dtype=np.int64), (text, ids)), shape=(len(paragraphs), vocabulary.size)
    )


def pooled_spectrum(matrix: sp.csr_array) -> Spectrum:
    pooled = matrix.sum(axis=0)
    return Spectrum.from_frequencies(pooled[pooled > 0])


def calibration(name: str, bank: sp.csr_array, text_size: int, args: argparse.Namespace) -> None:
    rng = np.random.default_rng(7)
    flagged = dict.fromkeys(
        [
            "welch",
            "permutation",
            "g range excludes 0",
            "pooled: permutation",
            "pooled: jackknife range excludes 0",
            "token-level z",
        ],
        0,
    )
    short = 0
    start = time.perf_counter()
    for _ in range(args.draws):
        chosen = rng.permutation(bank.shape[0])[: args.texts]
        first, second = bank[chosen[: args.texts // 2]], bank[chosen[args.texts // 2 :]]
        a, b = types_per_text(first, text_size), types_per_text(second, text_size)
        short += len(a.too_short) + len(b.too_short)
        flagged["welch"] += welch_test(a.types, b.types).p < 0.05
        flagged["permutation"] += permutation_test(a.types, b.types, 999, rng).p < 0.05
        effect = hedges_g(a.types, b.types)
        flagged["g range excludes 0"] += effect.low > 0 or effect.high < 0
        common = int(min(first.sum(), second.sum()))
        pooled = pooled_types_test(first, second, common, args.resamples, rng)
        flagged["pooled: permutation"] += pooled.p < 0.05
        flagged["pooled: jackknife range excludes 0"] += pooled.low > 0 or pooled.high < 0
        matched = size_matched([pooled_spectrum(first), pooled_spectrum(second)], common)
        token_test = pairwise_z_tests(
            [m.types for m in matched], [m.sd_population for m in matched], ["1", "2"]
        )
        flagged["token-level z"] += token_test[0].p < 0.05
    lengths = bank.sum(axis=1)
    print(
        f"\n### {name}: {bank.shape[0]} texts in the bank (median {int(np.median(lengths))} tokens), "
        f"{args.draws} draws of {args.texts} texts split {args.texts // 2} / {args.texts - args.texts // 2}, "
        f"per-text size {text_size} ({short / args.draws:.1f} texts per draw shorter, listed and left out), "
        f"{time.perf_counter() - start:.0f} s\n"
    )
    print("| test | flagged: p < 0.05 (a range: excludes 0, nominal 10%) | of draws |")
    print("| --- | ---: | ---: |")
    for test, count in flagged.items():
        print(f"| {test} | {count / args.draws:.1%} | {count} / {args.draws} |")


def speed(args: argparse.Namespace) -> None:
    rng = np.random.default_rng(1)
    p = zipf_weights(args.words)
    lengths = np.round(np.exp(rng.uniform(np.log(300), np.log(3000), args.speed_texts))).astype(int)
    matrix = sp.csr_array(np.array([rng.multinomial(n, p) for n in lengths]))
    half = args.speed_texts // 2
    first, second = matrix[:half], matrix[half:]
    print(
        f"\n### Speed: {args.speed_texts} texts ({half} / {args.speed_texts - half}), {args.words} words, "
        f"{matrix.nnz} non-zero cells\n"
    )
    timings = []
    for label, run in (
        ("text_keyness (Mann-Whitney U and Welch, Holm)", lambda: text_keyness(first, second)),
        ("dispersion (range, DP, DP_norm, Juilland's D)", lambda: dispersion(matrix)),
        (
            "compare_texts (per-text E[V(300)], Welch, 9,999 permutations, g; pooled: 999 deals, jackknife)",
            lambda: compare_texts(first, second, 300, int(min(first.sum(), second.sum())), rng),
        ),
    ):
        start = time.perf_counter()
        run()
        timings.append((label, time.perf_counter() - start))
    dense1 = (first / first.sum(axis=1)[:, None]).toarray()
    dense2 = (second / second.sum(axis=1)[:, None]).toarray()
    start = time.perf_counter()
    mannwhitneyu(dense1, dense2, axis=0, method="asymptotic")
    timings.append(
        ("scipy.stats.mannwhitneyu on the dense matrix, for comparison", time.perf_counter() - start)
    )
    print("| computation | seconds |")
    print("| --- | ---: |")
    for label, seconds in timings:
        print(f"| {label} | {seconds:.2f} |")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--draws", type=int, default=400)
    parser.add_argument("--texts", type=int, default=40)
    parser.add_argument("--resamples", type=int, default=199, help="deals of the pooled permutation test")
    parser.add_argument("--words", type=int, default=50_000)
    parser.add_argument("--speed-texts", type=int, default=400)
    args = parser.parse_args()
    speed(args)
    calibration("Simulated topic-clustered texts", topic_texts(np.random.default_rng(2024), 1500), 150, args)
    calibration("Standard-library docstring paragraphs", docstring_paragraphs(), 40, args)


if __name__ == "__main__":
    main()
