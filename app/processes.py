"""Processes of this machine: child processes that end with their parent, even when the parent is killed
(``kill -9``), and whether a process still runs (a zombie, dead but not yet reaped, does not)."""

from __future__ import annotations

import ctypes
import ctypes.util
import os
import signal
import sys
from pathlib import Path

_PR_SET_PDEATHSIG = 1


def die_with_parent() -> None:
    """Ask the kernel to send this process SIGTERM when its parent ends (Linux ``prctl(PR_SET_PDEATHSIG)``);
    elsewhere nothing happens (a parent that exits normally still ends its children itself). Called first
    thing in a child process; if the parent already ended meanwhile, end now."""
    if not sys.platform.startswith("linux"):
        return
    libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6", use_errno=True)
    libc.prctl(_PR_SET_PDEATHSIG, signal.SIGTERM, 0, 0, 0)
    if os.getppid() == 1:
        os.kill(os.getpid(), signal.SIGTERM)


def process_running(pid: int) -> bool:
    """Whether process ``pid`` of this machine still runs. A process that has ended but whose parent has not
    collected it (a zombie: state ``Z`` or ``X`` in /proc/PID/stat, proc(5)) does not: a server killed with
    its worker leaves the worker a zombie where the machine's first process never collects its orphans
    (containers). Another user's process is taken to run."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    if not Path("/proc/self/stat").exists():
        return True  # no /proc (not Linux): the answer of kill(pid, 0) stands
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False  # it ended meanwhile
    return state not in ("Z", "X")
