"""Child processes that end with their parent, even when the parent is killed (``kill -9``)."""

from __future__ import annotations

import ctypes
import ctypes.util
import os
import signal
import sys

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
