"""Scratch entries of ended processes are removed; those of running processes and other files are kept."""

from __future__ import annotations

import os
import subprocess
import sys

from app.ingest import scratch


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
