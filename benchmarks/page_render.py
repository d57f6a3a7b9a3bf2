"""Server time of pages: the first view (computed) and later views (kept) of the Library, the Corpus page and
the Comparison page for 2..8 corpora.

Runs the app in-process (FastAPI's TestClient) on a temporary store holding the synthetic demo corpora plus
two more made from the same texts, so no network or server start-up is measured. Prints a Markdown table of
the first request's time per page (models are fitted before, so it measures the page's own computation),
then the median and best times over repeated requests (the page kept rendered), and each median as a
multiple of the Library page's (the lightest page) in the same run. With ``--large-mb M``, two generated
texts of about M and M/2 MB (benchmarks/ingest_throughput.py's generator: many types) are stored too, and
their Corpus pages and their Comparison are timed the same way.

    python benchmarks/page_render.py [--repeats 7] [--large-mb 50]
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import sys
import tempfile
import time
from pathlib import Path

from fastapi.testclient import TestClient

from app.config import DEMO_DIR, Settings
from app.main import create_app

sys.path.insert(0, str(Path(__file__).resolve().parent))
from ingest_throughput import write_generated_text  # noqa: E402 - a sibling script, not a package


def timed(client: TestClient, url: str, repeats: int) -> tuple[float, float, float]:
    """(first view, median of later views, best of later views) in milliseconds."""
    start = time.perf_counter()
    client.get(url).raise_for_status()  # the first view computes the page; later views find it kept
    first = 1000 * (time.perf_counter() - start)
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        client.get(url).raise_for_status()
        times.append(1000 * (time.perf_counter() - start))
    return first, statistics.median(times), min(times)


def add_generated(client: TestClient, directory: Path, megabytes: float) -> list[int]:
    """Store two generated texts of about ``megabytes`` and half as many MB; their corpus ids."""
    ids = []
    for share, seed in ((1.0, 2024), (0.5, 7)):
        path = directory / f"generated-{seed}.txt"
        write_generated_text(path, int(megabytes * share * 1_000_000), seed=seed)
        with path.open("rb") as handle:
            answer = client.post(
                "/api/corpora?wait=1", data={"name": path.stem}, files={"files": (path.name, handle)}
            )
        answer.raise_for_status()
        ids.append(answer.json()["id"])
    return ids


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=7)
    parser.add_argument(
        "--large-mb", type=float, help="also two generated corpora of this many and half as many MB"
    )
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        # tasks run in the requesting thread: every corpus is counted and its models fitted before timing
        settings = Settings(data_dir=Path(tmp), load_demo=True, task_worker=False)
        with TestClient(create_app(settings)) as client:
            for i, path in enumerate(sorted(DEMO_DIR.glob("*_letters.txt"))[:2]):
                with path.open("rb") as handle:
                    client.post(
                        "/api/corpora?wait=1",
                        data={"name": f"extra {i}"},
                        files={"files": (path.name, handle)},
                    )
            ids = [c["id"] for c in client.get("/api/corpora").json()]
            rows = [("Library", *timed(client, "/", args.repeats))]
            rows.append(("Corpus page", *timed(client, f"/corpora/{ids[0]}", args.repeats)))
            for k in range(2, min(8, len(ids)) + 1):
                query = "&".join(f"corpus={i}" for i in ids[:k])
                rows.append((f"Comparison, {k} corpora", *timed(client, f"/compare?{query}", args.repeats)))
            if args.large_mb:
                large = add_generated(client, Path(tmp), args.large_mb)
                for cid in large:
                    tokens = client.get(f"/api/corpora/{cid}").json()["tokens"]
                    rows.append(
                        (f"Corpus page, {tokens:,} tokens", *timed(client, f"/corpora/{cid}", args.repeats))
                    )
                query = "&".join(f"corpus={i}" for i in large)
                rows.append(("Comparison of these two", *timed(client, f"/compare?{query}", args.repeats)))
    print(
        f"Machine: {os.cpu_count()} CPUs, {platform.processor() or platform.machine()}, Python "
        f"{platform.python_version()}; x Library = median time over the Library page's, same run.\n"
    )
    print("| page | first view ms | later views: median ms | best ms | x Library |")
    print("| --- | ---: | ---: | ---: | ---: |")
    library_median = rows[0][2]
    for name, first, median, best in rows:
        print(f"| {name} | {first:,.1f} | {median:.1f} | {best:.1f} | {median / library_median:.1f} |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
