"""Crash safety: the server is killed (SIGKILL) in the middle of an ingestion and started again.

An upload is a background task that counts the text, then stores everything in one transaction
(app/services/ingestion.py); the corpus's model report is a second task that follows (app/services/tasks.py). Whatever the moment of the kill, the restarted store must be sound (SQLite's
own checks), and the corpus absent or complete, never half; a corpus whose transaction committed before the
kill must be there (a process crash loses no committed transaction in WAL mode, whatever the synchronous
setting: SQLite documentation, "Write-Ahead Logging" and "PRAGMA synchronous").
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass

import httpx
import pytest

from tests.safety.checks import assert_complete_corpus, assert_matches, assert_sound_store
from tests.safety.generated import GeneratedText, write_text
from tests.safety.server import Server, running_server, start_server

NAME = "generated text"
POLL_SECONDS = 0.02
WAL_GROWTH_WHILE_STORING = (
    4 << 20
)  # bytes the write-ahead log has grown by: the store transaction is under way


@dataclass(frozen=True)
class Observation:
    """What the test sees of a running ingestion: its job, whether the corpus is listed, the WAL's growth."""

    status: str
    progress: float
    listed: bool
    wal_growth: int
    models: str | None


MOMENTS: dict[str, Callable[[Observation], bool]] = {
    # Part of the text counted, nothing stored yet.
    "counting": lambda o: o.status == "running" and 0 < o.progress < 1 and not o.listed,
    # Counting finished and the one transaction is writing its rows (the WAL grows), not yet committed.
    "storing": lambda o: o.progress == 1 and not o.listed and o.wal_growth > WAL_GROWTH_WHILE_STORING,
    # Committed (the corpus is listed) and its model report being computed by the task worker.
    "warming": lambda o: o.listed and o.models == "running",
}


def wal_size(server: Server) -> int:
    wal = server.store_path.with_name(server.store_path.name + "-wal")
    return wal.stat().st_size if wal.exists() else 0


def upload_then_kill(server: Server, text: GeneratedText, moment: str, timeout: float = 120) -> Observation:
    """Upload ``text`` without waiting (202 and a job), poll until ``moment`` is seen, then SIGKILL."""
    with httpx.Client(base_url=server.base_url, timeout=60) as http:
        wal_before = wal_size(server)
        with text.path.open("rb") as file:
            accepted = http.post("/api/corpora", data={"name": NAME}, files={"files": ("big.txt", file)})
        assert accepted.status_code == 202, accepted.text
        job_url = accepted.json()["url"]
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            job = http.get(job_url).json()
            seen = Observation(
                status=job["status"],
                progress=job["progress"],
                listed=any(c["name"] == NAME for c in http.get("/api/corpora").json()),
                wal_growth=wal_size(server) - wal_before,
                models=(job["models"] or {}).get("status"),
            )
            if MOMENTS[moment](seen):
                server.kill()
                return seen
            assert job["status"] in ("queued", "running") or (job["models"] or {}).get("status") in (
                "queued",
                "running",
            ), f"the job ended before the moment was seen: {job}"
            time.sleep(POLL_SECONDS)
    raise AssertionError(f"moment {moment!r} not seen within {timeout} s")


@pytest.mark.slow
@pytest.mark.parametrize("moment", list(MOMENTS))
def test_kill_during_ingestion_leaves_the_corpus_absent_or_complete(tmp_path, request, moment):
    # The big text makes counting and the store transaction last long enough to be caught in the middle;
    # after the commit the length of the model fits is what counts, and a smaller text has them too.
    text = request.getfixturevalue("medium_text" if moment == "warming" else "big_text")
    data_dir = tmp_path / "data"
    server = start_server(data_dir)
    try:
        seen = upload_then_kill(server, text, moment)
    finally:
        server.kill()
    assert server.process.returncode == -9

    with (
        running_server(data_dir) as restarted,
        httpx.Client(base_url=restarted.base_url, timeout=120) as http,
    ):
        assert_sound_store(restarted.store_path)
        # The copy of the uploaded text and the type-id file of the killed server were removed at start.
        left_behind = sorted(entry.name for entry in (data_dir / "work").iterdir())
        assert left_behind == [], left_behind
        stored = [c for c in http.get("/api/corpora").json() if c["name"] == NAME]
        if moment == "counting":
            assert stored == [], seen
        elif moment == "warming":
            assert len(stored) == 1, seen
        else:  # the commit may have landed between the last look and the kill: absent or complete
            assert len(stored) <= 1, seen
        for corpus in stored:
            assert_complete_corpus(http, corpus)
            assert_matches(http, corpus, text)
        if moment == "warming":
            # The interrupted model report was queued again at start and the new worker takes it up.
            deadline = time.monotonic() + 60
            while (
                status := http.get(f"/api/corpora/{stored[0]['id']}").json()["models"]["status"]
            ) == "queued":
                assert time.monotonic() < deadline, "the interrupted model report was not taken up again"
                time.sleep(0.2)
            assert status in ("running", "ready", "failed"), status
            error = http.get(f"/api/corpora/{stored[0]['id']}").json()["models"]["error"] or ""
            assert "interrupted" not in error and "stopped" not in error, error

        # The restarted server keeps working: a new upload lands whole beside what survived.
        small = write_text(tmp_path / "small.txt", 20_000, common_words=2_000, random_state=2)
        with small.path.open("rb") as file:
            created = http.post(
                "/api/corpora?wait=1", data={"name": "after the crash"}, files={"files": file}
            )
        assert created.status_code == 201, created.text
        assert_complete_corpus(http, created.json())
        assert_matches(http, created.json(), small)
        assert len(http.get("/api/corpora").json()) == len(stored) + 1
        assert_sound_store(restarted.store_path)
