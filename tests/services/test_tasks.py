"""Running tasks (app.services.tasks): the lease of a running task is renewed whatever its stage, and a
process that lost its task records nothing."""

from __future__ import annotations

import threading
import time

from app.ingest.profiles import BUILTIN_PROFILES
from app.services import tasks
from app.store import tasks as queue
from app.store.corpora import list_corpora
from app.store.db import make_engine


def ingest_task(engine, tmp_path, text: str) -> queue.TaskView:
    source = tmp_path / "text.txt"
    source.write_text(text, encoding="utf-8")
    params = tasks.ingest_params([(source, "text.txt")], "docstrings", {}, BUILTIN_PROFILES["default"])
    return tasks.queue_upload(engine, params, source.stat().st_size)


def test_the_lease_is_renewed_while_the_models_are_fitted(tmp_path, stdlib_text, monkeypatch):
    engine = make_engine(f"sqlite:///{tmp_path / 'store.sqlite3'}")
    counted = queue.claim(engine, ingest_task(engine, tmp_path, stdlib_text[:200_000]).id, "me")
    reports = []
    tasks.run(engine, counted, tmp_path, reports.append)
    (report,) = reports
    assert report.member == tasks.ANONYMOUS and report.priority == tasks.NEW_REPORT_PRIORITY
    monkeypatch.setattr(queue, "HEARTBEAT_EVERY", 0.05)
    fitting = queue.claim(engine, report.id, queue.process_name())
    beats, stop = set(), threading.Event()

    def watch() -> None:  # what another process sees of the task meanwhile
        while not stop.is_set():
            seen = queue.get(engine, report.id)
            if seen.stage == "fitting models":
                beats.add(seen.heartbeat_at)
            time.sleep(0.01)

    watcher = threading.Thread(target=watch)
    watcher.start()
    started = time.monotonic()
    tasks.run(engine, fitting, tmp_path, reports.append)
    seconds = time.monotonic() - started
    stop.set()
    watcher.join()
    assert queue.get(engine, report.id).state == queue.DONE
    # fitting reports no progress: only the heartbeat thread moves heartbeat_at (every 0.05 s here)
    assert len(beats) >= min(5, seconds / 0.05 / 2), (len(beats), seconds)


def test_a_task_taken_from_its_process_stores_no_corpus_and_keeps_its_new_outcome(tmp_path, stdlib_text):
    engine = make_engine(f"sqlite:///{tmp_path / 'store.sqlite3'}")
    task = ingest_task(engine, tmp_path, stdlib_text[:100_000])
    stale = queue.claim(engine, task.id, queue.process_name())
    # Taken for dead before it ran (its owner frozen past STALE_AFTER), then failed by the recovery.
    assert queue.reclaim(engine, stale, message=tasks.INTERRUPTED)
    tasks.run(engine, stale, tmp_path, lambda _report: None)  # the frozen owner wakes up and goes on
    ended = queue.get(engine, task.id)
    assert (ended.state, ended.message, ended.corpus_id) == (queue.FAILED, tasks.INTERRUPTED, None)
    assert list_corpora(engine) == []  # its first progress report stopped it
