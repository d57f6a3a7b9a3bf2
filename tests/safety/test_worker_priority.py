"""Background work yields the CPU to pages: the task worker of a real server runs at a lower priority."""

from __future__ import annotations

import time
from pathlib import Path

import pytest

from app.services.worker import TASK_NICENESS
from tests.safety.server import running_server

PROC = Path("/proc")


def niceness(pid: int) -> int:
    """Field 19 of /proc/PID/stat (proc(5)); the fields after the parenthesised command name."""
    stat = (PROC / str(pid) / "stat").read_text()
    return int(stat.rsplit(")", 1)[1].split()[16])


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
def test_the_task_worker_runs_at_a_lower_cpu_priority_than_its_server(tmp_path):
    with running_server(tmp_path / "data") as server:
        deadline = time.monotonic() + 30
        workers = []
        while not workers and time.monotonic() < deadline:
            workers = [p for p in children(server.process.pid) if niceness(p) != niceness(server.process.pid)]
            time.sleep(0.1)
        assert workers, "no task worker with its own priority under the server"
        assert [niceness(p) for p in workers] == [min(19, niceness(server.process.pid) + TASK_NICENESS)]
