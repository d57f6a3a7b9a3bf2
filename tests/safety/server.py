"""The real server as a subprocess (``lexigrowth serve``) on a free loopback port, for the safety tests."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import httpx

from tests.safety.apps import STORE_FILE

REPO_ROOT = Path(__file__).resolve().parents[2]


def free_port() -> int:
    """A TCP port on 127.0.0.1 that nothing listens on right now (the kernel picks it)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


def serve_command() -> list[str]:
    """The installed ``lexigrowth`` script beside this interpreter, or the same entry point through it."""
    script = Path(sys.executable).with_name("lexigrowth")
    if script.exists():
        return [str(script), "serve"]
    return [sys.executable, "-c", "from app.cli import main; main()", "serve"]


@dataclass
class Server:
    """A running ``lexigrowth serve`` process and where to reach it."""

    process: subprocess.Popen
    base_url: str
    data_dir: Path
    log_path: Path

    @property
    def store_path(self) -> Path:
        return self.data_dir / STORE_FILE

    def log(self) -> str:
        return self.log_path.read_text(encoding="utf-8", errors="replace")

    def kill(self) -> None:
        """SIGKILL: the process dies at once, as in a power cut or the kernel's out-of-memory killer.

        Worker processes it started (the parallel counting engine) are in its process group (it was started
        in a session of its own) and die with it."""
        if self.process.poll() is None:
            os.killpg(self.process.pid, signal.SIGKILL)
        self.process.wait(timeout=30)

    def stop(self) -> None:
        """A clean stop (SIGTERM, then SIGKILL if it does not end within 20 s)."""
        if self.process.poll() is None:
            os.killpg(self.process.pid, signal.SIGTERM)
            try:
                self.process.wait(timeout=20)
            except subprocess.TimeoutExpired:
                self.kill()


def start_server(
    data_dir: Path, *, load_demo: bool = False, ready_timeout: float = 120.0, extra_env: dict | None = None
) -> Server:
    """Start ``lexigrowth serve`` on a free loopback port and wait until ``/api/health`` answers.

    The demo corpora (``load_demo``) are loaded before the server accepts connections, hence the long
    default ``ready_timeout``. The output goes to ``server-<port>.log`` beside the data directory."""
    data_dir.mkdir(parents=True, exist_ok=True)
    port = free_port()
    log_path = data_dir.parent / f"server-{port}.log"
    # None of the caller's LEXIGROWTH_* settings (a database URL, lab mode...): the store is the SQLite
    # file in data_dir, in personal mode.
    env = {name: value for name, value in os.environ.items() if not name.startswith("LEXIGROWTH_")}
    env |= {"LEXIGROWTH_LOAD_DEMO": "true" if load_demo else "false"} | (extra_env or {})
    with log_path.open("wb") as log:
        process = subprocess.Popen(
            [*serve_command(), "--host", "127.0.0.1", "--port", str(port), "--data-dir", str(data_dir)],
            cwd=REPO_ROOT,
            env=env,
            stdout=log,
            stderr=subprocess.STDOUT,
            start_new_session=True,
        )
    server = Server(process, f"http://127.0.0.1:{port}", data_dir, log_path)
    deadline = time.monotonic() + ready_timeout
    while time.monotonic() < deadline:
        if process.poll() is not None:
            raise RuntimeError(f"the server exited with code {process.returncode}:\n{server.log()}")
        try:
            if httpx.get(f"{server.base_url}/api/health", timeout=2).status_code == 200:
                return server
        except httpx.TransportError:
            pass
        time.sleep(0.1)
    server.kill()
    raise RuntimeError(f"the server did not answer within {ready_timeout} s:\n{server.log()}")


@contextmanager
def running_server(data_dir: Path, **options) -> Iterator[Server]:
    """``start_server`` for the length of a block; stopped (or killed) at its end whatever happens."""
    server = start_server(data_dir, **options)
    try:
        yield server
    finally:
        server.stop()
