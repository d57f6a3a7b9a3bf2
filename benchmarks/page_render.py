"""Server time of cached pages: the Corpus page, and the Comparison page for 2..8 corpora.

Runs the app in-process (FastAPI's TestClient) on a temporary store holding the synthetic demo corpora plus
two more made from the same texts, so no network or server start-up is measured. Prints a Markdown table of
median and best times over repeated requests, after one warm-up request per page (fits are cached then),
and each median as a multiple of the Library page's (the lightest page) in the same run.

    python benchmarks/page_render.py [--repeats 7]
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import tempfile
import time
from pathlib import Path

from fastapi.testclient import TestClient

from app.config import DEMO_DIR, Settings
from app.main import create_app


def timed(client: TestClient, url: str, repeats: int) -> tuple[float, float]:
    client.get(url).raise_for_status()  # warm-up: fits and snapshots are cached after this
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        client.get(url).raise_for_status()
        times.append(1000 * (time.perf_counter() - start))
    return statistics.median(times), min(times)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        with TestClient(create_app(Settings(data_dir=Path(tmp), load_demo=True))) as client:
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
    print(
        f"Machine: {os.cpu_count()} CPUs, {platform.processor() or platform.machine()}, Python "
        f"{platform.python_version()}; x Library = median time over the Library page's, same run.\n"
    )
    print("| page | median ms | best ms | x Library |\n| --- | ---: | ---: | ---: |")
    library_median = rows[0][1]
    for name, median, best in rows:
        print(f"| {name} | {median:.1f} | {best:.1f} | {median / library_median:.1f} |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
