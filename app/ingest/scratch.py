"""Scratch files of ingestion (copies of uploads, type-id sequences), named after the process that made
them, so that what a killed process left behind can be told apart from what a running one is using.

A scratch entry is called ``<kind>-<pid>-<random>``. ``remove_orphans`` deletes the entries of a work
folder whose process no longer runs: the server calls it when it starts, so that a text uploaded while
the server was killed does not stay on disk.
"""

from __future__ import annotations

import os
import re
import shutil
from pathlib import Path

from app.processes import process_running

UPLOAD = "upload"
"""Kind of the folder that holds the copies of one upload's files."""
TYPE_IDS = "lexigrowth-types"
"""Kind of the file that holds a corpus's type-id sequence while it is counted."""
_ENTRY = re.compile(rf"^(?:{UPLOAD}|{TYPE_IDS})-(\d+)-")


def prefix(kind: str) -> str:
    """The name prefix of a new scratch entry of ``kind`` (``UPLOAD`` or ``TYPE_IDS``)."""
    return f"{kind}-{os.getpid()}-"


def remove_own(work_dir: Path) -> None:
    """Delete the scratch entries of this process (a process that exits at once, on SIGTERM)."""
    for entry in work_dir.iterdir():
        match = _ENTRY.match(entry.name)
        if match is not None and int(match.group(1)) == os.getpid():
            _remove_entry(entry)


def _remove_entry(entry: Path) -> None:
    if entry.is_dir():
        shutil.rmtree(entry, ignore_errors=True)
    else:
        entry.unlink(missing_ok=True)


def remove_orphans(work_dir: Path) -> list[str]:
    """Delete the scratch entries in ``work_dir`` whose process has ended; return their names."""
    removed = []
    for entry in sorted(work_dir.iterdir()):
        match = _ENTRY.match(entry.name)
        if match is None or process_running(int(match.group(1))):
            continue
        _remove_entry(entry)
        removed.append(entry.name)
    return removed
