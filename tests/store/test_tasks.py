"""Background tasks in the store: priority order, one claim per task, recovery of a dead process's tasks."""

from __future__ import annotations

import socket
from concurrent.futures import ThreadPoolExecutor

from app.store import tasks as queue
from app.store.db import make_engine


def store(tmp_path):
    return make_engine(f"sqlite:///{tmp_path / 'store.sqlite3'}")


def test_higher_priority_first_then_the_oldest(tmp_path):
    engine = store(tmp_path)
    demo = queue.enqueue(engine, "ingest", {"n": 1}, priority=-1)
    model = queue.enqueue(engine, "models", {"n": 2})
    upload = queue.enqueue(engine, "ingest", {"n": 3}, priority=1)
    later = queue.enqueue(engine, "models", {"n": 4})
    order = [queue.claim_next(engine, "me").id for _ in range(4)]
    assert order == [upload.id, model.id, later.id, demo.id]
    assert queue.claim_next(engine, "me") is None


def test_a_task_is_claimed_once_however_many_ask(tmp_path):
    engine = store(tmp_path)
    task = queue.enqueue(engine, "models", {})
    with ThreadPoolExecutor(8) as pool:
        claims = list(pool.map(lambda i: queue.claim(engine, task.id, f"worker-{i}"), range(8)))
    assert sum(c is not None for c in claims) == 1
    assert queue.get(engine, task.id).state == queue.RUNNING


def test_the_same_key_gives_the_same_task(tmp_path):
    engine = store(tmp_path)
    first = queue.enqueue(engine, "models", {"corpus_id": 1}, dedupe_key="models:1")
    again = queue.enqueue(engine, "models", {"corpus_id": 1}, dedupe_key="models:1")
    assert again.id == first.id


def test_tasks_of_a_dead_process_are_failed_with_a_message(tmp_path):
    engine = store(tmp_path)
    mine, dead = queue.enqueue(engine, "ingest", {}), queue.enqueue(engine, "ingest", {})
    queue.claim(engine, mine.id, queue.process_name())  # this process: alive
    queue.claim(engine, dead.id, f"{socket.gethostname()}:{2**22 + 12345}")  # no such process
    failed = queue.interrupted(engine)
    assert [t.id for t in failed] == [dead.id]
    ended = queue.get(engine, dead.id)
    assert ended.state == queue.FAILED and "interrupted" in ended.message
    assert queue.get(engine, mine.id).state == queue.RUNNING
    queue.requeue(engine, dead.id, {"attempt": 2})
    assert queue.get(engine, dead.id).state == queue.QUEUED and queue.get(engine, dead.id).params == {
        "attempt": 2
    }
