"""Background work yields the CPU to pages: every thread of the task worker of a real server (its lanes,
its heartbeat threads and the numerical libraries' threads alike) runs at a lower priority, and the lane of
the demo corpora at the lowest.

On Linux the nice value belongs to each thread (sched(7)), so each one is read: field 19 of
/proc/PID/task/TID/stat (proc(5))."""

from __future__ import annotations

import time
from pathlib import Path

import httpx
import pytest

from app.services.worker import BACKGROUND_NICENESS, TASK_NICENESS
from tests.safety.server import running_server

PROC = Path("/proc")


def niceness(stat_file: Path) -> int:
    """Field 19 of a /proc stat file (proc(5)); the fields after the parenthesised command name."""
    return int(stat_file.read_text().rsplit(")", 1)[1].split()[16])


def process_niceness(pid: int) -> int:
    return niceness(PROC / str(pid) / "stat")


def thread_niceness(pid: int) -> dict[int, int]:
    """The nice value of every thread of process ``pid``: {thread id: nice}."""
    found = {}
    for entry in (PROC / str(pid) / "task").iterdir():
        try:
            found[int(entry.name)] = niceness(entry / "stat")
        except OSError:
            continue  # ended meanwhile
    return found


def children(pid: int) -> list[int]:
    """Processes whose parent is ``pid`` (field 4 of /proc/PID/stat)."""
    found = []
    for entry in PROC.iterdir():
        if entry.name.isdigit():
            try:
                if int((entry / "stat").read_text().rsplit(")", 1)[1].split()[1]) == pid:
                    found.append(int(entry.name))
            except (OSError, IndexError, ValueError):
                continue  # ended meanwhile
    return found


@pytest.mark.skipif(not (PROC / "self" / "stat").exists(), reason="reads /proc (Linux)")
def test_every_thread_of_the_task_worker_runs_at_a_lower_cpu_priority_than_its_server(tmp_path):
    with running_server(tmp_path / "data") as server:
        server_nice = process_niceness(server.process.pid)
        expected = min(19, server_nice + TASK_NICENESS)
        deadline = time.monotonic() + 60
        threads: dict[int, int] = {}
        while time.monotonic() < deadline:
            health = httpx.get(f"{server.base_url}/api/health", timeout=10).json()["worker"]
            if health["last_seen_seconds"] is not None:  # the worker has started its lanes
                assert health["pid"] in children(server.process.pid)
                threads = thread_niceness(health["pid"])
                break
            time.sleep(0.1)
        # main thread and three lanes at least; the numerical libraries add theirs on a machine with
        # several cores (none on one core), and each is read too
        assert len(threads) >= 4, threads
        values = sorted(threads.values())
        # the background lane alone lower still (a thread's nice value can only be raised without privileges)
        assert values.count(BACKGROUND_NICENESS) >= 1 and set(values) <= {expected, BACKGROUND_NICENESS}, (
            server_nice,
            threads,
        )
        assert values.count(expected) >= 3 or expected == BACKGROUND_NICENESS, (server_nice, threads)
        assert thread_niceness(server.process.pid)[server.process.pid] == server_nice  # the server: as it was
