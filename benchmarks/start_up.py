"""Start-up and members first: how soon ``lexigrowth serve`` answers, and how soon a member's 200-word draft
reaches a ready corpus page while the demo corpora load and on an idle server.

Usage: ``python benchmarks/start_up.py [--code DIR ...] [--repeat N] [--workdir DIR]``

``--code`` names checkouts of the program to compare in the same run (each server runs with its folder
first on ``PYTHONPATH``; e.g. an older commit exported with ``git archive REF | tar -x -C DIR``); by
default this repository alone. For each, ``--repeat`` times, on a new store:

- start, demo loading: ``lexigrowth serve`` with the demo corpora queued (``LEXIGROWTH_LOAD_DEMO=1``);
  seconds from the process's start to the first 200 answer of ``/api/health`` and of ``/`` (the home
  page), each polled every 20 ms in a thread of its own; then at once a 200-word draft pasted as the
  Upload page sends it (``POST /api/corpora`` with the text), from the upload's answer to the corpus page
  with its models, while the demo corpora are being counted and fitted;
- idle: the same server program without demo corpora, the draft sent ``SETTLE_SECONDS`` after its task
  worker's first sign of life (``/api/health``), when its warm-up is over, and then a second draft (the
  fastest shown).

The drafts are generated words (``ingest_throughput.write_generated_text``), different each time.
Output: Markdown, with the machine; wall seconds, the median of the runs.
"""

from __future__ import annotations

import argparse
import os
import platform
import shutil
import socket
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import httpx

sys.path.insert(0, str(Path(__file__).resolve().parent))
from ingest_throughput import cpu_model, write_generated_text  # noqa: E402 - a sibling script

REPO = Path(__file__).resolve().parent.parent
POLL_SECONDS = 0.02
DRAFT_WORDS = 200
SETTLE_SECONDS = 5.0


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _first_200(url: str, started: float, out: dict, key: str, stop: threading.Event) -> None:
    while not stop.is_set():
        try:
            if httpx.get(url, timeout=30).status_code == 200:
                out[key] = time.perf_counter() - started
                return
        except httpx.TransportError:
            pass
        time.sleep(POLL_SECONDS)


class Server:
    """``lexigrowth serve`` of the checkout ``code`` on a new store; times to the first answers."""

    def __init__(self, code: Path, workdir: Path, demo: bool) -> None:
        self.data_dir = Path(tempfile.mkdtemp(prefix="start-", dir=workdir))
        port = _free_port()
        self.base = f"http://127.0.0.1:{port}"
        env = {k: v for k, v in os.environ.items() if not k.startswith("LEXIGROWTH_")}
        env |= {
            "LEXIGROWTH_DATA_DIR": str(self.data_dir),
            "LEXIGROWTH_LOAD_DEMO": "1" if demo else "0",
            "PYTHONPATH": str(code),
        }
        command = [str(Path(sys.executable).with_name("lexigrowth")), "serve", "--port", str(port)]
        started = time.perf_counter()
        self.process = subprocess.Popen(
            command, cwd=code, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
        )
        self.first: dict[str, float] = {}
        stop = threading.Event()
        pollers = [
            threading.Thread(target=_first_200, args=(self.base + path, started, self.first, path, stop))
            for path in ("/api/health", "/")
        ]
        for poller in pollers:
            poller.start()
        deadline = time.monotonic() + 120
        while len(self.first) < 2 and time.monotonic() < deadline and self.process.poll() is None:
            time.sleep(POLL_SECONDS)
        stop.set()
        for poller in pollers:
            poller.join()
        if len(self.first) < 2:
            self.stop()
            raise SystemExit(f"the server of {code} did not answer")
        self.http = httpx.Client(base_url=self.base, timeout=600)

    def wait_for_worker(self) -> None:
        while self.http.get("/api/health").json()["worker"]["last_seen_seconds"] is None:
            time.sleep(POLL_SECONDS)

    def draft(self, text: str, name: str) -> float:
        """Seconds from the upload's answer to the corpus page with its models."""
        # without the session cookie the pages set: as a script posts (a browser sends the page's token)
        accepted = httpx.post(f"{self.base}/api/corpora", data={"name": name, "text": text}, timeout=600)
        assert accepted.status_code == 202, accepted.text
        received = time.perf_counter()
        job_url = accepted.json()["url"]
        while (job := self.http.get(job_url).json())["status"] not in ("done", "failed"):
            time.sleep(POLL_SECONDS)
        if job["status"] == "failed":
            raise SystemExit(f"the draft failed: {job['error']}")
        corpus = job["corpus_id"]
        while self.http.get(f"/api/corpora/{corpus}").json()["models"]["status"] in ("queued", "running"):
            time.sleep(POLL_SECONDS)
        page = self.http.get(f"/corpora/{corpus}")
        assert page.status_code == 200 and "models-pending" not in page.text
        return time.perf_counter() - received

    def stop(self) -> None:
        self.process.terminate()
        self.process.wait(30)
        shutil.rmtree(self.data_dir, ignore_errors=True)


def measure(code: Path, workdir: Path, words: list[str], repeat: int) -> dict[str, list[float]]:
    found: dict[str, list[float]] = {}
    drafts = iter(range(10_000))

    def text() -> str:
        offset = next(drafts) * DRAFT_WORDS
        return " ".join(words[offset : offset + DRAFT_WORDS])

    for _ in range(repeat):
        server = Server(code, workdir, demo=True)
        try:
            found.setdefault("health", []).append(server.first["/api/health"])
            found.setdefault("home", []).append(server.first["/"])
            found.setdefault("draft, demo loading", []).append(server.draft(text(), "draft"))
        finally:
            server.stop()
        server = Server(code, workdir, demo=False)
        try:
            server.wait_for_worker()
            time.sleep(SETTLE_SECONDS)
            found.setdefault("draft, idle", []).append(
                min(server.draft(text(), f"draft {i}") for i in range(2))
            )
        finally:
            server.stop()
    return found


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--code", type=Path, action="append", help="checkouts to compare (default: this one)")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--workdir", type=Path, default=Path(tempfile.gettempdir()))
    args = parser.parse_args(argv)
    codes = args.code or [REPO]
    workdir = Path(tempfile.mkdtemp(prefix="lexigrowth-start-", dir=args.workdir))
    try:
        sample = workdir / "drafts.txt"
        write_generated_text(sample, 2_000_000)
        words = sample.read_text(encoding="utf-8").split()
        results = {code: measure(code, workdir, words, args.repeat) for code in codes}
    finally:
        shutil.rmtree(workdir, ignore_errors=True)
    columns = ["health", "home", "draft, demo loading", "draft, idle"]
    print(
        f"Machine: {os.cpu_count()} CPUs, {cpu_model()}, Python {platform.python_version()}; wall seconds, "
        f"median of {args.repeat} (min-max).\n"
    )
    print("| code | first 200 /api/health | first 200 / | draft to ready page, demo loading | draft, idle |")
    print("| --- | ---: | ---: | ---: | ---: |")
    for code, found in results.items():
        cells = [
            f"{statistics.median(found[c]):.2f} ({min(found[c]):.2f}-{max(found[c]):.2f})" for c in columns
        ]
        print(f"| {code.name} | " + " | ".join(cells) + " |")


if __name__ == "__main__":
    main()
