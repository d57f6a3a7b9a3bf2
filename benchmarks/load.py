"""Load test of a running server: simulated users browsing the Library, Corpus and Comparison pages.

Usage: ``python benchmarks/load.py [--url http://127.0.0.1:8000 | --serve 1,4 [--database-url URL]]
[--users 20] [--duration 60] [--timeout 30] [--uploads] [--think SECONDS]``

The server must hold at least two corpora (``lexigrowth serve`` loads the demo corpora into an empty store).
With ``--serve``, the script starts ``lexigrowth serve --workers N`` itself for each N given, on a new store
(a new SQLite folder, or the PostgreSQL database of ``--database-url``, emptied first), waits until the demo
corpora and their models are ready, runs the load, stops the server, and prints one table per N with the
throughput relative to the first.
With ``--uploads``, every user also pastes a 2,000-word text once per loop (``POST /api/corpora``, timed
until the 202 that acknowledges it; the counting and fitting go on in the background meanwhile).
Each user is a thread with its own HTTP connection (kept alive, as a browser does) and requests, in a loop,
the Library (``/``), a Corpus page (``/corpora/{id}``, the corpora in turn) and a Comparison page
(``/compare?corpus=..``, the live view of two or three corpora, in turn); users start at different corpora.
Without ``--think`` a user sends its next request as soon as the previous one is answered (a closed loop),
so the load adapts to the server: the numbers to read are the latencies and the absence of errors at that
concurrency; with ``--think S`` it first pauses for an exponentially distributed time of mean S seconds, as
a person reading the page. No new request starts after ``--duration`` seconds; those under way are waited for.

An error is any answer other than 200 or a transport failure (refused connection, timeout). The output is
a Markdown table: per page and overall, requests, errors, the 50th, 95th and 99th percentile and the largest
latency in milliseconds (linear interpolation between order statistics, numpy.percentile's default), with the
throughput. Client and server share the machine when run on loopback: the latencies include the client's
own share of the CPU. Exit code: 0 without errors, 1 with any error, 2 if the server cannot be used.
"""

from __future__ import annotations

import argparse
import math
import os
import random
import shutil
import socket
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import httpx

PAGES = ("library", "corpus", "comparison", "upload")
UPLOAD_WORDS = 2_000
PERCENTILES = (50, 95, 99)


@dataclass(frozen=True)
class Sample:
    """One request: which page, how long until the whole answer was read, and the error if any."""

    page: str
    seconds: float
    error: str | None = None


@dataclass(frozen=True)
class Row:
    """Summary of one page (or of all pages): requests, errors, latency percentiles and maximum in ms."""

    page: str
    requests: int
    errors: int
    percentiles_ms: tuple[float, ...]


def percentile(values: Sequence[float], q: float) -> float:
    """The q-th percentile (0 <= q <= 100) by linear interpolation between the order statistics x_(1) <=
    ... <= x_(n): at h = (n - 1) q / 100, x_(floor h) + (h - floor h)(x_(floor h + 1) - x_(floor h)), counting
    from 0 (Hyndman and Fan's definition 7, the default of numpy.percentile). NaN for no values."""
    if not values:
        return math.nan
    ordered = sorted(values)
    h = (len(ordered) - 1) * q / 100
    low = math.floor(h)
    high = min(low + 1, len(ordered) - 1)
    return ordered[low] + (h - low) * (ordered[high] - ordered[low])


def comparison_sets(ids: Sequence[int]) -> list[list[int]]:
    """Groups of two and three consecutive corpora (wrapping round), one starting at each corpus."""
    return [[ids[(start + k) % len(ids)] for k in range(2 + start % 2)] for start in range(len(ids))]


def user_urls(ids: Sequence[int], user: int, uploads: bool = False) -> list[tuple[str, str]]:
    """The (page, URL) loop of one user: for each corpus in turn, the Library, its page and a comparison;
    with ``uploads``, one upload at the end of the loop."""
    groups = comparison_sets(ids)
    loop = []
    for step in range(len(ids)):
        at = (user + step) % len(ids)
        query = "&".join(f"corpus={cid}" for cid in groups[at])
        loop += [("library", "/"), ("corpus", f"/corpora/{ids[at]}"), ("comparison", f"/compare?{query}")]
    return loop + ([("upload", "/api/corpora")] if uploads else [])


def upload_text(user: int, round_: int) -> str:
    """A different text of ``UPLOAD_WORDS`` invented words for each user and round (a seeded generator)."""
    rng = random.Random(user * 100_003 + round_)
    return " ".join(f"w{int(rng.paretovariate(1.1)) % 50_000}" for _ in range(UPLOAD_WORDS))


def run_user(
    base_url: str,
    urls: list[tuple[str, str]],
    deadline: float,
    timeout: float,
    user: int = 0,
    think: float = 0.0,
) -> list[Sample]:
    """Request ``urls`` in a loop until ``deadline`` (time.monotonic) and return every request's sample;
    with ``think`` > 0, pause after each answer for a time drawn from the exponential distribution of that
    mean (seeded by the user's index), as a person reads a page before the next click."""
    samples: list[Sample] = []
    rounds = 0
    reading = random.Random(user)
    with httpx.Client(base_url=base_url, timeout=timeout) as client:
        while True:
            rounds += 1
            for page, url in urls:
                if time.monotonic() >= deadline:
                    return samples
                started = time.perf_counter()
                try:
                    if page == "upload":
                        text = upload_text(user, rounds)
                        # as a browser posts a form: with the page's Origin (a post that carries the session
                        # cookie but says neither Origin nor Sec-Fetch-Site must bring the CSRF token)
                        response = client.post(
                            url, data={"name": f"load {rounds}", "text": text}, headers={"Origin": base_url}
                        )
                        expected = 202
                    else:
                        response, expected = client.get(url), 200
                    error = None if response.status_code == expected else f"HTTP {response.status_code} {url}"
                except httpx.HTTPError as exc:
                    error = f"{type(exc).__name__} {url}"
                samples.append(Sample(page, time.perf_counter() - started, error))
                if think > 0:
                    time.sleep(min(reading.expovariate(1 / think), max(0.0, deadline - time.monotonic())))


def run_load(
    base_url: str,
    ids: Sequence[int],
    users: int,
    duration: float,
    timeout: float,
    uploads: bool = False,
    think: float = 0.0,
) -> list[Sample]:
    """``users`` threads running ``run_user`` together for ``duration`` seconds; all their samples."""
    deadline = time.monotonic() + duration
    results: list[list[Sample]] = [[] for _ in range(users)]

    def user(index: int) -> None:
        urls = user_urls(ids, index, uploads)
        results[index] = run_user(base_url, urls, deadline, timeout, index, think)

    threads = [threading.Thread(target=user, args=(i,), name=f"user-{i}") for i in range(users)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    return [sample for samples in results for sample in samples]


def summarize(samples: Sequence[Sample]) -> list[Row]:
    """One row per page, in PAGES order, then "all"."""
    groups = [(page, [s for s in samples if s.page == page]) for page in PAGES] + [("all", list(samples))]
    return [
        Row(
            page,
            len(group),
            sum(s.error is not None for s in group),
            tuple(percentile([1000 * s.seconds for s in group], q) for q in PERCENTILES)
            + (max((1000 * s.seconds for s in group), default=math.nan),),
        )
        for page, group in groups
    ]


def format_table(rows: Sequence[Row]) -> str:
    header = ["page", "requests", "errors", *(f"p{q} ms" for q in PERCENTILES), "max ms"]
    lines = ["| " + " | ".join(header) + " |", "|" + "---|" * len(header)]
    for row in rows:
        cells = [row.page, f"{row.requests:,}", f"{row.errors:,}", *(f"{v:,.0f}" for v in row.percentiles_ms)]
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines)


def corpus_ids(base_url: str, timeout: float) -> list[int]:
    response = httpx.get(f"{base_url}/api/corpora", timeout=timeout)
    response.raise_for_status()
    return [c["id"] for c in response.json()]


class StartedServer:
    """``lexigrowth serve --workers N`` on a new store, ready when the demo corpora and their models are."""

    def __init__(self, workers: int, database_url: str | None, timeout: float) -> None:
        self.data_dir = Path(tempfile.mkdtemp(prefix="lexigrowth-load-"))
        with socket.socket() as probe:
            probe.bind(("127.0.0.1", 0))
            self.port = probe.getsockname()[1]
        env = {k: v for k, v in os.environ.items() if not k.startswith("LEXIGROWTH_")}
        env["LEXIGROWTH_DATA_DIR"] = str(self.data_dir)
        if database_url:
            _empty_postgres(database_url)
            env["LEXIGROWTH_DATABASE_URL"] = database_url
        command = [str(Path(sys.executable).with_name("lexigrowth")), "serve", "--port", str(self.port)]
        self.process = subprocess.Popen(
            [*command, "--workers", str(workers)],
            env=env,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        self.url = f"http://127.0.0.1:{self.port}"
        deadline = time.monotonic() + 600
        while time.monotonic() < deadline:
            try:
                listed = httpx.get(f"{self.url}/api/corpora", timeout=timeout).json()
                pending = httpx.get(f"{self.url}/api/jobs", timeout=timeout).json()
                if (
                    len(listed) >= 2
                    and not pending
                    and all(
                        httpx.get(f"{self.url}/api/corpora/{c['id']}", timeout=timeout).json()["models"][
                            "status"
                        ]
                        in ("ready", "failed")
                        for c in listed
                    )
                ):
                    return
            except httpx.HTTPError:
                pass
            time.sleep(0.5)
        self.stop()
        raise SystemExit("the server did not get ready within 10 minutes")

    def stop(self) -> None:
        self.process.terminate()
        self.process.wait(30)
        shutil.rmtree(self.data_dir, ignore_errors=True)


def _empty_postgres(url: str) -> None:
    """Drop every table of the PostgreSQL database at ``url`` (a benchmark starts on an empty store)."""
    import sqlalchemy as sa

    engine = sa.create_engine(url)
    with engine.begin() as connection:
        connection.execute(sa.text("DROP SCHEMA public CASCADE; CREATE SCHEMA public"))
    engine.dispose()


def measure(base_url: str, args: argparse.Namespace) -> tuple[list[Sample], float, int]:
    ids = corpus_ids(base_url, args.timeout)
    if len(ids) < 2:
        raise SystemExit(f"error: {base_url} holds {len(ids)} corpora; a comparison needs at least 2")
    started = time.monotonic()
    samples = run_load(base_url, ids, args.users, args.duration, args.timeout, args.uploads, args.think)
    return samples, time.monotonic() - started, len(ids)


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--url", default="http://127.0.0.1:8000", help="the server (default: %(default)s)")
    parser.add_argument("--serve", help="start the server with these numbers of processes in turn (e.g. 1,4)")
    parser.add_argument("--database-url", help="with --serve: a PostgreSQL URL (emptied first)")
    parser.add_argument("--uploads", action="store_true", help="every user also uploads a text per loop")
    parser.add_argument(
        "--think", type=float, default=0.0, help="mean seconds a user reads each page (default: no pause)"
    )
    parser.add_argument("--users", type=int, default=20, help="simulated users (default: %(default)s)")
    parser.add_argument("--duration", type=float, default=60, help="seconds of load (default: %(default)s)")
    parser.add_argument(
        "--timeout", type=float, default=30, help="seconds per request (default: %(default)s)"
    )
    args = parser.parse_args(argv)
    if args.users < 1 or args.duration <= 0 or args.timeout <= 0:
        parser.error("--users, --duration and --timeout must be positive")
    runs = [int(n) for n in args.serve.split(",")] if args.serve else [None]
    first_rate = None
    errors: list[str] = []
    for workers in runs:
        server = StartedServer(workers, args.database_url, args.timeout) if workers else None
        base_url = server.url if server else args.url.rstrip("/")
        try:
            samples, wall, corpora = measure(base_url, args)
        except (httpx.HTTPError, ValueError, KeyError) as exc:
            print(f"error: cannot list the corpora of {base_url}: {exc}", file=sys.stderr)
            return 2
        finally:
            if server:
                server.stop()
        rate = len(samples) / wall
        first_rate = first_rate or rate
        store = "PostgreSQL" if args.database_url else "SQLite"
        where = f"{workers} server process(es), {store}" if workers else base_url
        print(f"\n{args.users} users for {args.duration:g} s against {where} ({corpora} corpora)\n")
        print(format_table(summarize(samples)))
        print(
            f"\n{len(samples):,} requests in {wall:.1f} s: {rate:.1f} requests/s "
            f"({rate / first_rate:.2f}x the first run)"
        )
        errors += [s.error for s in samples if s.error]
    for message in sorted(set(errors))[:10]:
        print(f"error: {message} (x{errors.count(message)})", file=sys.stderr)
    return 1 if errors else 0


if __name__ == "__main__":
    sys.exit(main())
