"""Scratch entries of ended processes (collected or not) are removed; those of running processes and other files are kept."""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

from app.ingest import scratch
from app.processes import process_running


def ended_pid() -> int:
    process = subprocess.Popen([sys.executable, "-c", "pass"])
    process.wait()
    return process.pid


def test_only_the_scratch_of_ended_processes_is_removed(tmp_path) -> None:
    dead = ended_pid()
    (tmp_path / f"upload-{dead}-abc").mkdir()
    (tmp_path / f"upload-{dead}-abc" / "0000-draft.txt").write_text("unpublished words")
    (tmp_path / f"lexigrowth-types-{dead}-xyz.i32").write_bytes(b"\0" * 8)
    mine = tmp_path / f"{scratch.prefix(scratch.UPLOAD)}def"
    mine.mkdir()
    unrelated = tmp_path / "notes-123-keep.txt"
    unrelated.write_text("not scratch")

    removed = scratch.remove_orphans(tmp_path)

    assert removed == [f"lexigrowth-types-{dead}-xyz.i32", f"upload-{dead}-abc"]
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([mine.name, unrelated.name])
    assert mine.name.startswith(f"upload-{os.getpid()}-")


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="reads /proc (Linux)")
def test_the_scratch_of_an_ended_but_uncollected_process_is_removed(tmp_path) -> None:
    # A server killed with SIGKILL leaves its worker ended but uncollected (a zombie) wherever the machine's
    # first process does not collect orphans, as in containers; its pid still answers kill(pid, 0).
    zombie = subprocess.Popen([sys.executable, "-c", "pass"])
    deadline = time.monotonic() + 10
    while "Z" not in Path(f"/proc/{zombie.pid}/stat").read_text().rsplit(")", 1)[1].split()[0]:
        assert time.monotonic() < deadline, "the child did not end"
        time.sleep(0.02)
    os.kill(zombie.pid, 0)  # no error: to kill(2) the zombie still exists
    (tmp_path / f"lexigrowth-types-{zombie.pid}-xyz.i32").write_bytes(b"\0" * 8)
    try:
        assert scratch.remove_orphans(tmp_path) == [f"lexigrowth-types-{zombie.pid}-xyz.i32"]
        assert not process_running(zombie.pid)
        assert process_running(os.getpid())
    finally:
        zombie.wait()
