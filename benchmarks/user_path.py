"""The user's path, end to end: from a text file to a ready corpus page, against the naive word count.

Usage: ``python benchmarks/user_path.py [--sizes 1,100,1000] [--source DIR_OR_FILE] [--repeat N]
[--pipelines naive,cli,browser] [--workdir DIR]``

For each size (MB = 10^6 bytes) the input is built first, as in ``ingest_throughput.py`` (the ``.txt``
files of ``--source`` repeated, or a deterministic generated text), then timed, each in new processes:

- naive: ``collections.Counter(re.findall(r"\\w+", text.lower()))`` on the whole file, process start to
  exit (the baseline of the ratios);
- cli: ``lexigrowth ingest FILE --name ...`` on a new store, process start to exit; then, outside the
  timing, the corpus page and its JSON twin are rendered from that store and must show the models without
  computing anything (``LEXIGROWTH_TASK_WORKER=0`` and no "being computed" notice);
- browser: ``lexigrowth serve`` on a new store (no demo corpora), then the upload as a browser sends it
  (multipart POST of the file, answered 202 with a job), the job polled every 50 ms as the Upload page
  does, until the corpus page and its JSON twin answer 200 with the models shown. Two times: from the
  start of the upload, and from the moment the upload was received (the answer to the POST) to the page.

Memory: the peak of the sum of proportional set sizes (PSS) of all processes of the pipeline (the server
with its task worker and counting processes), sampled every 0.2 s. Besides the table, the script times a
200-word draft through the browser path and the server's start until its first answer.
Output: Markdown, with the machine.
"""

from __future__ import annotations

import argparse
import os
import platform
import shutil
import socket
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from ingest_throughput import (  # noqa: E402 - a sibling script, not a package
    MB,
    SAMPLE_SECONDS,
    _tree_pss,
    cpu_model,
    write_corpus_text,
    write_generated_text,
)

REPO = Path(__file__).resolve().parent.parent
PIPELINES = ("naive", "cli", "browser")
POLL_SECONDS = 0.05
DRAFT_WORDS = 200
NAIVE = "import collections, re, sys; print(len(collections.Counter(re.findall(r'\\w+', open(sys.argv[1], encoding='utf-8').read().lower()))))"


@dataclass(frozen=True)
class Timing:
    pipeline: str
    seconds: float
    peak_pss_mib: float
    after_upload: float | None = None


class PeakMemory:
    """Samples the PSS of a process tree in a thread until stopped; ``peak`` in MiB."""

    def __init__(self, pid: int) -> None:
        self.pid, self.peak = pid, 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()

    def _run(self) -> None:
        while not self._stop.wait(SAMPLE_SECONDS):
            self.peak = max(self.peak, _tree_pss(self.pid))

    def stop(self) -> float:
        self._stop.set()
        self._thread.join()
        self.peak = max(self.peak, _tree_pss(self.pid))
        return self.peak / 2**20


def _environment(data_dir: Path) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("LEXIGROWTH_")}
    return env | {"LEXIGROWTH_DATA_DIR": str(data_dir), "LEXIGROWTH_LOAD_DEMO": "0"}


def _lexigrowth() -> list[str]:
    """The ``lexigrowth`` command installed beside this Python."""
    return [str(Path(sys.executable).with_name("lexigrowth"))]


def _timed(pipeline: str, command: list[str], env: dict[str, str] | None = None) -> Timing:
    start = time.perf_counter()
    child = subprocess.Popen(command, cwd=REPO, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    memory = PeakMemory(child.pid)
    stderr = child.stderr.read() if child.stderr else b""
    _, status, usage = os.wait4(child.pid, 0)
    seconds = time.perf_counter() - start
    child.returncode = os.waitstatus_to_exitcode(status)
    # A short process may end before the first sample: its own peak resident size is the floor.
    peak = max(memory.stop(), usage.ru_maxrss / 1024)
    if child.returncode:
        raise SystemExit(f"{pipeline} failed ({child.returncode}): {stderr.decode()[-2000:]}")
    return Timing(pipeline, seconds, peak)


def run_naive(path: Path, workdir: Path) -> Timing:
    return _timed("naive", [sys.executable, "-c", NAIVE, str(path)])


def check_page_ready(data_dir: Path) -> None:
    """Render corpus 1's page and JSON twin from the store, computing nothing: the models must be there."""
    from fastapi.testclient import TestClient

    from app.config import Settings
    from app.main import create_app

    settings = Settings(data_dir=data_dir, load_demo=False, task_worker=False)
    with TestClient(create_app(settings)) as client:
        page, twin = client.get("/corpora/1"), client.get("/api/corpora/1")
    assert page.status_code == 200 and "models-pending" not in page.text, "the corpus page is not ready"
    assert twin.json()["models"]["status"] in ("ready", "failed"), twin.json()["models"]


def run_cli(path: Path, workdir: Path) -> Timing:
    data_dir = Path(tempfile.mkdtemp(prefix="cli-", dir=workdir))
    try:
        timing = _timed(
            "cli", [*_lexigrowth(), "ingest", str(path), "--name", path.stem], _environment(data_dir)
        )
        check_page_ready(data_dir)
        return timing
    finally:
        shutil.rmtree(data_dir, ignore_errors=True)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Server:
    """``lexigrowth serve`` on a new store, with the PSS of its process tree sampled from its start."""

    def __init__(self, workdir: Path) -> None:
        import httpx

        self.data_dir = Path(tempfile.mkdtemp(prefix="serve-", dir=workdir))
        self.port = _free_port()
        self.started = time.perf_counter()
        self.process = subprocess.Popen(
            [*_lexigrowth(), "serve", "--port", str(self.port)],
            cwd=REPO,
            env=_environment(self.data_dir),
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        self.memory = PeakMemory(self.process.pid)
        self.http = httpx.Client(base_url=f"http://127.0.0.1:{self.port}", timeout=600)
        while True:
            try:
                self.http.get("/api/health")
                break
            except httpx.TransportError:
                if self.process.poll() is not None:
                    raise SystemExit("the server did not start") from None
                time.sleep(0.01)
        self.first_answer = time.perf_counter() - self.started

    def upload(self, name: str, files: dict | None = None, text: str | None = None) -> tuple[float, float]:
        """Upload as the Upload page does and wait for the corpus page with its models: (seconds from the
        start of the upload, seconds from its answer)."""
        start = time.perf_counter()
        data = {"name": name} | ({"text": text} if text is not None else {})
        accepted = self.http.post("/api/corpora", data=data, files=files)
        assert accepted.status_code == 202, accepted.text
        received = time.perf_counter()
        job_url = accepted.json()["url"]
        while True:
            job = self.http.get(job_url).json()
            if job["status"] == "failed":
                raise SystemExit(f"upload failed: {job['error']}")
            if job["status"] == "done":
                break
            time.sleep(POLL_SECONDS)
        corpus = job["corpus_id"]
        while self.http.get(f"/api/corpora/{corpus}").json()["models"]["status"] in ("queued", "running"):
            time.sleep(POLL_SECONDS)
        page, twin = self.http.get(f"/corpora/{corpus}"), self.http.get(f"/api/corpora/{corpus}")
        assert page.status_code == 200 and "models-pending" not in page.text
        assert twin.status_code == 200
        end = time.perf_counter()
        return end - start, end - received

    def stop(self) -> float:
        self.http.close()
        self.process.terminate()
        self.process.wait(30)
        peak = self.memory.stop()
        shutil.rmtree(self.data_dir, ignore_errors=True)
        return peak


def run_browser(path: Path, workdir: Path) -> Timing:
    server = Server(workdir)
    try:
        with path.open("rb") as file:
            total, after = server.upload(path.stem, files={"files": (path.name, file, "text/plain")})
    finally:
        peak = server.stop()
    return Timing("browser", total, peak, after)


RUNNERS: dict[str, Callable[[Path, Path], Timing]] = {
    "naive": run_naive,
    "cli": run_cli,
    "browser": run_browser,
}


def draft_and_start(workdir: Path, repeat: int) -> list[str]:
    """The server's start until its first answer, and 200-word drafts (generated text) pasted in the Upload
    page, from the upload's answer to the corpus page with its models: the first one right after the start
    (the task worker is still starting), then ``repeat`` more on the running server."""
    sample = workdir / "draft-source.txt"
    write_generated_text(sample, 50_000)
    words = sample.read_text(encoding="utf-8").split()
    server = Server(workdir)
    try:
        drafts = []
        for attempt in range(repeat + 1):
            offset = attempt * DRAFT_WORDS
            _, after = server.upload(f"draft {attempt}", text=" ".join(words[offset : offset + DRAFT_WORDS]))
            drafts.append(after)
    finally:
        server.stop()
    warm = sorted(drafts[1:])
    return [
        f"- Server start to its first answer: {server.first_answer:.2f} s.",
        f"- A {DRAFT_WORDS}-word draft pasted in the Upload page, from the upload's answer to the corpus page "
        f"with its models: {drafts[0]:.2f} s right after the start, then {warm[0]:.2f} s (fastest; median "
        f"{warm[len(warm) // 2]:.2f} s of {repeat}) on the running server.",
    ]


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--sizes", default="1,100,1000", help="input sizes in MB, comma-separated")
    parser.add_argument("--source", type=Path, help="folder of .txt files (or one file) to repeat")
    parser.add_argument("--pipelines", default=",".join(PIPELINES))
    parser.add_argument("--repeat", type=int, default=1, help="runs per pipeline (the fastest is shown)")
    parser.add_argument("--workdir", type=Path, default=Path(tempfile.gettempdir()))
    args = parser.parse_args(argv)
    pipelines = [p for p in args.pipelines.split(",") if p]
    workdir = Path(tempfile.mkdtemp(prefix="lexigrowth-path-", dir=args.workdir))
    from importlib.metadata import version

    lines = [
        f"Machine: {os.cpu_count()} CPUs, {cpu_model()}, Python {platform.python_version()}, "
        f"polars {version('polars')}, numpy {version('numpy')}, scipy {version('scipy')}. "
        f"Fastest of {args.repeat} run(s); input: "
        + (f"the .txt files of {args.source.name}, repeated" if args.source else "generated text")
        + ".",
        "",
        "| MB | pipeline | wall s | MB/s | x naive | upload received -> page s | peak MiB (all processes, PSS) |",
        "| ---: | --- | ---: | ---: | ---: | ---: | ---: |",
    ]
    try:
        for size_mb in (float(s) for s in args.sizes.split(",")):
            size = int(size_mb * MB)
            path = workdir / f"input-{size_mb:g}MB.txt"
            if args.source:
                write_corpus_text(path, args.source, size)
            else:
                write_generated_text(path, size)
            actual = path.stat().st_size
            results = {
                p: min((RUNNERS[p](path, workdir) for _ in range(args.repeat)), key=lambda t: t.seconds)
                for p in pipelines
            }
            naive = results.get("naive")
            for timing in results.values():
                ratio = f"{naive.seconds / timing.seconds:.2f}" if naive else ""
                after = f"{timing.after_upload:.2f}" if timing.after_upload is not None else ""
                lines.append(
                    f"| {actual / MB:,.0f} | {timing.pipeline} | {timing.seconds:.2f} | "
                    f"{actual / MB / timing.seconds:.1f} | {ratio} | {after} | {timing.peak_pss_mib:,.0f} |"
                )
                print(lines[-1], file=sys.stderr, flush=True)
            path.unlink()
        lines += ["", *draft_and_start(workdir, max(3, args.repeat))]
    finally:
        shutil.rmtree(workdir, ignore_errors=True)
    print("\n".join(lines))


if __name__ == "__main__":
    main()
