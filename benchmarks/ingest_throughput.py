"""Ingestion throughput: our engines against a naive word count, on one large text.

Usage: ``python benchmarks/ingest_throughput.py [--size-mb 200] [--source DIR_OR_FILE] [--profile NAME]
[--repeat N] [--pipelines naive,nltk,serial,local,dask]``

The input is built first (MB = 10^6 bytes), as UTF-8 in a temporary folder (``--workdir``, default the
system one): with ``--source``, the ``.txt`` files of a folder (or one file) decoded by the ingestion
readers, used as they are (only throughput is measured) and repeated until the size is reached; without
it, a deterministic generated text (``write_generated_text``). Then every pipeline runs alone in a new
Python process, timed from start to exit, so interpreter start-up and imports count (this script imports
nothing heavy at the top):

- naive: the whole file read at once, ``collections.Counter(re.findall(r"\\w+", text.lower()))``;
- nltk: the whole file read at once, ``nltk.FreqDist(nltk.wordpunct_tokenize(text.lower()))`` (it counts
  punctuation runs as tokens too, so its token count is not comparable);
- serial, local, dask: ``app.ingest.counting.count_sources`` with that engine (dask on a ``LocalCluster``
  of one worker process per core, started inside the timed process).

For each: wall time (the fastest of ``--repeat`` runs), throughput, its ratio to the naive pipeline
measured in the same run, CPU time of all its processes (user + system, from ``os.wait4``: less sensitive
than wall time to other load on the machine), peak resident memory of the largest process (``ru_maxrss``
of the child from ``os.wait4``, which covers its worker processes) and of all its processes together (the
sum of their proportional set sizes, sampled from /proc every 0.2 s: shared pages count once), and the
tokens and types counted. A child inherits its parent's ``ru_maxrss`` at start-up, so the text is built
in another process and this one stays small. The output is Markdown, with the machine.

Token counts are compared with the naive pipeline. The default profile of the service differs from
``\\w+`` on purpose (it drops numbers, keeps inner apostrophes and hyphens, splits digits from letters), so
by default the engines run with ``word-runs``, the closest profile: case-folded runs of letters and
combining marks, numbers kept, apostrophes and hyphens splitting words. It still differs from ``\\w+`` on
underscores, digits next to letters ("mp3"), numbers with inner points or commas ("1,000"), combining marks
and case folding beyond lower-casing ("ß"); the generated text contains none of these, so there the
counts must agree exactly. ``--profile default`` (or any built-in profile) measures the service's own.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import re
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

PIPELINES = ("naive", "nltk", "serial", "local", "dask")
OUR_ENGINES = ("serial", "local", "dask")
MB = 10**6
SAMPLE_SECONDS = 0.2
WORD_RUNS = "word-runs"

# Generated text: syllables of two characters, so that every rank has its own word.
_CONSONANTS = "bcdfghklmnprstvz"
_VOWELS = "aeioué"
SYLLABLES = [c + v for c in _CONSONANTS for v in _VOWELS]
WORDS_PER_LINE = 12
BLOCK_TOKENS = 1 << 20


@dataclass(frozen=True)
class GeneratedText:
    """What ``write_generated_text`` wrote: its size in bytes, word tokens and distinct words."""

    size: int
    tokens: int
    types: int


def word_for_rank(rank: int) -> str:
    """The word of a 0-based frequency rank: its digits in base ``len(SYLLABLES)`` as syllables."""
    syllables = []
    while True:
        rank, digit = divmod(rank, len(SYLLABLES))
        syllables.append(SYLLABLES[digit])
        if not rank:
            return "".join(reversed(syllables))


def write_generated_text(
    path: Path, size: int, vocabulary: int = 1_000_000, exponent: float = 1.2, seed: int = 2024
) -> GeneratedText:
    """Write at least ``size`` bytes of deterministic UTF-8 text to ``path``.

    Tokens are drawn independently (numpy Generator seeded with ``seed``) from the continuous
    Zipf-Mandelbrot law with density proportional to (x + q)^-s on [0, V), q = 2.7, s = ``exponent``,
    V = ``vocabulary``, by inverting its distribution function, F(x) = ((x + q)^(1-s) - q^(1-s)) /
    ((V + q)^(1-s) - q^(1-s)); the rank of a token is floor(x). Frequent words are short and the number
    of types keeps growing as in real text. Lines hold ``WORDS_PER_LINE`` words separated by spaces, the
    first capitalised, and end with ".". Words are lower-case letters ("é" among them), so every
    tokenizer that case-folds and splits on everything but letters sees the same tokens.
    """
    import numpy as np

    rng = np.random.default_rng(seed)
    shift, power = 2.7, 1 - exponent
    low, high = shift**power, (vocabulary + shift) ** power
    words = [word_for_rank(r) for r in range(vocabulary)]
    seen = np.zeros(vocabulary, dtype=bool)
    written = tokens = 0
    with path.open("wb") as out:
        while written < size:
            x = (low + rng.random(BLOCK_TOKENS) * (high - low)) ** (1 / power) - shift
            ranks = np.clip(x.astype(np.int64), 0, vocabulary - 1)
            seen[ranks] = True
            block = list(map(words.__getitem__, ranks.tolist()))
            block[::WORDS_PER_LINE] = [w.capitalize() for w in block[::WORDS_PER_LINE]]
            lines = (" ".join(block[i : i + WORDS_PER_LINE]) for i in range(0, len(block), WORDS_PER_LINE))
            data = (".\n".join(lines) + ".\n").encode("utf-8")
            out.write(data)
            written += len(data)
            tokens += len(block)
    return GeneratedText(size=written, tokens=tokens, types=int(seen.sum()))


def write_corpus_text(path: Path, source: Path, size: int) -> str:
    """Write the ``.txt`` files under ``source`` (sorted; or the file itself), decoded, as UTF-8 to
    ``path``, repeated and cut after a line so that the file holds about ``size`` bytes."""
    from app.ingest.readers import TextSource

    files = sorted(source.glob("*.txt")) if source.is_dir() else [source]
    if not files:
        raise SystemExit(f"no .txt files in {source}")
    data = "\n".join(TextSource.from_path(f).read_text() for f in files).encode("utf-8") + b"\n"
    copies, rest = divmod(size, len(data))
    with path.open("wb") as out:
        for _ in range(copies):
            out.write(data)
        out.write(data[: data.rfind(b"\n", 0, rest) + 1])
    return f"{len(files)} files from {source.name}, repeated"


# --- the pipelines, each run in its own process ---


def _word_runs_profile():
    from app.ingest.profiles import TokenizationProfile

    return TokenizationProfile(
        name=WORD_RUNS, numbers="keep", apostrophes="split", hyphens="split", char_unit=False
    )


def _profile(name: str):
    from app.ingest.profiles import get_profile

    return _word_runs_profile() if name == WORD_RUNS else get_profile(name)


def _naive(path: Path, profile: str) -> tuple[int, int]:
    from collections import Counter

    counts = Counter(re.findall(r"\w+", path.read_text(encoding="utf-8").lower()))
    return sum(counts.values()), len(counts)


def _nltk(path: Path, profile: str) -> tuple[int, int]:
    from nltk import FreqDist, wordpunct_tokenize

    try:  # nltk >= 3.10 stops any one regular-expression match after 5 s; here one match is the whole text
        from nltk import redos
    except ImportError:
        pass
    else:
        redos.DEFAULT_TIMEOUT = None
    counts = FreqDist(wordpunct_tokenize(path.read_text(encoding="utf-8").lower()))
    return counts.N(), counts.B()


def _engine(name: str) -> Callable[[Path, str], tuple[int, int]]:
    def run(path: Path, profile: str) -> tuple[int, int]:
        from app.ingest.counting import count_sources
        from app.ingest.readers import TextSource

        with count_sources([TextSource.from_path(path)], _profile(profile), engine=name) as result:
            return result.tokens, result.types

    return run


RUNNERS: dict[str, Callable[[Path, str], tuple[int, int]]] = {
    "naive": _naive,
    "nltk": _nltk,
    **{name: _engine(name) for name in OUR_ENGINES},
}


# --- measuring a child process ---


@dataclass(frozen=True)
class Measurement:
    pipeline: str
    seconds: float
    cpu_seconds: float
    largest_rss_mib: float
    total_pss_mib: float | None
    tokens: int
    types: int


def _descendants(root: int) -> list[int]:
    """``root`` and its descendant processes, from the parent ids in /proc/<pid>/stat."""
    parents: dict[int, int] = {}
    for entry in os.scandir("/proc"):
        if entry.name.isdigit():
            try:
                with open(f"/proc/{entry.name}/stat", "rb") as fh:
                    fields = fh.read().rsplit(b")", 1)[1].split()
            except OSError:
                continue  # the process has ended
            parents[int(entry.name)] = int(fields[1])
    tree, frontier = [root], [root]
    while frontier:
        frontier = [pid for pid, parent in parents.items() if parent in frontier]
        tree.extend(frontier)
    return tree


def _tree_pss(root: int) -> int:
    """Bytes of memory of ``root`` and its descendants: the sum of their proportional set sizes (Pss in
    /proc/<pid>/smaps_rollup, proc(5)), where a page shared by k processes (the Python and library code
    every worker maps) counts 1/k in each, so that the sum counts it once."""
    total = 0
    for pid in _descendants(root):
        try:
            with open(f"/proc/{pid}/smaps_rollup", "rb") as fh:
                for line in fh:
                    if line.startswith(b"Pss:"):
                        total += int(line.split()[1]) * 1024
                        break
        except OSError:
            continue
    return total


def measure(pipeline: str, path: Path, profile: str) -> Measurement:
    """Run one pipeline in a new process and measure it."""
    command = [sys.executable, __file__, "--measure", pipeline, "--input", str(path), "--profile", profile]
    peak = [0]
    done = threading.Event()
    start = time.perf_counter()
    child = subprocess.Popen(command, stdout=subprocess.PIPE, text=True)

    def sample() -> None:
        while not done.wait(SAMPLE_SECONDS):
            peak[0] = max(peak[0], _tree_pss(child.pid))

    sampler = threading.Thread(target=sample, daemon=True)
    if sys.platform == "linux":
        sampler.start()
    assert child.stdout is not None
    output = child.stdout.read()
    _, status, usage = os.wait4(child.pid, 0)
    seconds = time.perf_counter() - start
    done.set()
    child.returncode = os.waitstatus_to_exitcode(status)
    if child.returncode:
        raise SystemExit(f"{pipeline} failed with exit code {child.returncode}")
    counted = json.loads(output)
    return Measurement(
        pipeline=pipeline,
        seconds=seconds,
        cpu_seconds=usage.ru_utime + usage.ru_stime,
        largest_rss_mib=usage.ru_maxrss / 1024,  # KiB on Linux
        total_pss_mib=peak[0] / 2**20 if sys.platform == "linux" else None,
        tokens=counted["tokens"],
        types=counted["types"],
    )


def cpu_model() -> str:
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as fh:
            for line in fh:
                if line.startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def report(results: list[Measurement], size: int, described: str, profile: str, repeat: int) -> str:
    from importlib.metadata import version

    from app.ingest.engines import available_cpus

    baseline = next((r for r in results if r.pipeline == "naive"), None)
    lines = [
        f"Input: {size / MB:.1f} MB of UTF-8 text ({described}); engines' profile: {profile}; "
        f"fastest of {repeat} run(s) per pipeline.",
        f"Machine: {os.cpu_count()} CPUs ({available_cpus()} available), {cpu_model()}, "
        f"Python {platform.python_version()}, numpy {version('numpy')}, polars {version('polars')}, "
        f"regex {version('regex')}.",
        "",
        "| pipeline | wall s | MB/s | x naive | CPU s | peak RSS largest process (MiB) "
        "| peak memory all processes (PSS, MiB) | tokens | types |",
        "| --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |",
    ]
    for r in results:
        speed = size / MB / r.seconds
        ratio = f"{speed / (size / MB / baseline.seconds):.2f}" if baseline else "-"
        total = f"{r.total_pss_mib:.0f}" if r.total_pss_mib is not None else "n/a"
        lines.append(
            f"| {r.pipeline} | {r.seconds:.2f} | {speed:.1f} | {ratio} | {r.cpu_seconds:.1f} "
            f"| {r.largest_rss_mib:.0f} | {total} "
            f"| {r.tokens:,} | {r.types:,} |"
        )
    lines.append("")
    if baseline:
        for r in results:
            if r.pipeline in OUR_ENGINES:
                if (r.tokens, r.types) == (baseline.tokens, baseline.types):
                    verdict = "same tokens and types"
                else:
                    verdict = (
                        f"tokens {100 * (r.tokens - baseline.tokens) / baseline.tokens:+.3f}%, "
                        f"types {100 * (r.types - baseline.types) / baseline.types:+.3f}%"
                    )
                lines.append(f"- {r.pipeline} vs naive: {verdict}")
    ours = {(r.tokens, r.types) for r in results if r.pipeline in OUR_ENGINES}
    if len(ours) > 1:
        lines.append("- WARNING: our engines disagree")
    return "\n".join(lines)


def build_input(path: Path, size: int, source: Path | None) -> str:
    """Write the test text to ``path``; a description of it."""
    if source:
        return write_corpus_text(path, source, size)
    generated = write_generated_text(path, size)
    return f"generated, {generated.tokens:,} tokens, {generated.types:,} types"


def _run_self(*args: str) -> str:
    """This script in a new process (its output): the measuring process stays small, so that the
    ``ru_maxrss`` its children inherit from it at start-up stays far below theirs."""
    return subprocess.run(
        [sys.executable, __file__, *args], stdout=subprocess.PIPE, text=True, check=True
    ).stdout


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--size-mb", type=float, default=200, help="size of the test text in 10^6 bytes")
    parser.add_argument(
        "--source", type=Path, help="a folder of .txt files, or one file (default: generated)"
    )
    parser.add_argument("--profile", default=WORD_RUNS, help="tokenization profile of our engines")
    parser.add_argument("--pipelines", default=",".join(PIPELINES), help="comma-separated subset to run")
    parser.add_argument("--workdir", type=Path, help="where to write the test text (default: system temp)")
    parser.add_argument("--repeat", type=int, default=1, help="runs per pipeline; the fastest is reported")
    parser.add_argument("--build", type=Path, help=argparse.SUPPRESS)
    parser.add_argument("--measure", choices=PIPELINES, help=argparse.SUPPRESS)
    parser.add_argument("--input", type=Path, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    size = round(args.size_mb * MB)
    if args.build:
        print(build_input(args.build, size, args.source))
        return
    if args.measure:
        tokens, types = RUNNERS[args.measure](args.input, args.profile)
        print(json.dumps({"tokens": tokens, "types": types}))
        return
    pipelines = [p.strip() for p in args.pipelines.split(",") if p.strip()]
    unknown = sorted(set(pipelines) - set(PIPELINES))
    if unknown:
        parser.error(f"unknown pipelines: {', '.join(unknown)} (known: {', '.join(PIPELINES)})")
    with tempfile.TemporaryDirectory(prefix="lexigrowth-bench-", dir=args.workdir) as folder:
        path = Path(folder) / "input.txt"
        source = ["--source", str(args.source)] if args.source else []
        described = _run_self("--build", str(path), "--size-mb", str(args.size_mb), *source).strip()
        results = []
        for pipeline in pipelines:
            runs = [measure(pipeline, path, args.profile) for _ in range(args.repeat)]
            print(f"{pipeline}: {', '.join(f'{r.seconds:.1f}' for r in runs)} s", file=sys.stderr)
            results.append(min(runs, key=lambda r: r.seconds))
        print(report(results, path.stat().st_size, described, args.profile, args.repeat))


if __name__ == "__main__":
    main()
