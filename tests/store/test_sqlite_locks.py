"""A second engine on a SQLite store in the same process keeps the store's write-ahead log safe from other
processes (POSIX locks are per process and per file: fcntl(2))."""

from __future__ import annotations

import subprocess
import sys

from sqlalchemy import text

from app.store.db import make_engine


def test_another_process_leaves_the_log_of_a_process_with_two_engines(tmp_path):
    # What `lexigrowth serve` does (one engine to look for accounts, one for the app) while an admin runs
    # `lexigrowth user list`: the other process's connection closes, and the log must stay in place.
    path = tmp_path / "store.sqlite3"
    engines = []
    for _ in range(2):
        engines.append(make_engine(f"sqlite:///{path}"))
        with engines[-1].connect() as connection:
            connection.execute(text("SELECT count(*) FROM corpus")).all()
    other = f"import sqlite3; c = sqlite3.connect({str(path)!r}); c.execute('SELECT count(*) FROM corpus').fetchall(); c.close()"
    subprocess.run([sys.executable, "-c", other], check=True)
    assert path.with_name("store.sqlite3-wal").exists() and path.with_name("store.sqlite3-shm").exists()
    for engine in engines:
        engine.dispose()
