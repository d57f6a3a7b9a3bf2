"""Background tasks in the store: claim order (priority, fair shares between members), one claim per task,
leases (only the owner of a running task writes to it), heartbeats, recovery of a dead process's tasks.

Run on SQLite and, with LEXIGROWTH_TEST_DATABASE_URL, on PostgreSQL (``engine`` of tests/store/conftest.py).
"""

from __future__ import annotations

import socket
import time
from concurrent.futures import ThreadPoolExecutor
from datetime import timedelta

import pytest
from sqlalchemy import update

from app.store import corpora
from app.store import tasks as queue
from app.store.db import transaction
from app.store.tables import BackgroundTask
from tests.store.test_corpora import record

DEAD_PROCESS = f"{socket.gethostname()}:{2**22 + 12345}"  # above the kernel's largest pid: no such process


def age_heartbeat(engine, task_id: str, seconds: float) -> None:
    """Make a running task look silent for ``seconds`` (as a frozen or overloaded owner would)."""
    with transaction(engine) as session:
        session.exec(
            update(BackgroundTask)
            .where(BackgroundTask.id == task_id)
            .values(heartbeat_at=queue._now() - timedelta(seconds=seconds))
        )


def test_higher_priority_first_then_the_oldest(engine):
    demo = queue.enqueue(engine, "ingest", {"n": 1}, priority=-1)
    model = queue.enqueue(engine, "models", {"n": 2})
    upload = queue.enqueue(engine, "ingest", {"n": 3}, priority=1)
    later = queue.enqueue(engine, "models", {"n": 4})
    order = [queue.claim_next(engine, "me").id for _ in range(4)]
    assert order == [upload.id, model.id, later.id, demo.id]
    assert queue.claim_next(engine, "me") is None


def test_model_reports_of_small_corpora_first(engine):
    big = queue.enqueue(engine, "models", {}, size_hint=5_000_000)
    small = queue.enqueue(engine, "models", {}, size_hint=200)
    middle = queue.enqueue(engine, "models", {}, size_hint=40_000)
    assert [queue.claim_next(engine, "me").id for _ in range(3)] == [small.id, middle.id, big.id]


def test_one_members_flood_delays_anothers_upload_by_one_task_at_most(engine):
    flood = [queue.enqueue(engine, "ingest", {"n": i}, priority=1, member="member 1") for i in range(30)]
    first = queue.claim_next(engine, "lane-1")
    assert first.id == flood[0].id
    draft = queue.enqueue(engine, "ingest", {"draft": True}, priority=1, member="member 2")
    # member 1 has a task running, member 2 none: the draft goes next, before 29 older uploads
    assert queue.claim_next(engine, "lane-2").id == draft.id
    queue.finish(engine, first)
    # then round robin: member 2's second upload waits for one of member 1's at most
    second_draft = queue.enqueue(engine, "ingest", {"draft": 2}, priority=1, member="member 2")
    following = [queue.claim_next(engine, "lane-1").id, queue.claim_next(engine, "lane-1").id]
    assert second_draft.id in following


def test_members_are_served_in_turn_and_the_demo_after_everyone(engine):
    demo = queue.enqueue(engine, "ingest", {}, priority=-1, member="demo")
    a = [queue.enqueue(engine, "ingest", {"a": i}, priority=1, member="member 1") for i in range(3)]
    b = [queue.enqueue(engine, "ingest", {"b": i}, priority=1, member="member 2") for i in range(3)]
    order = []
    for _ in range(7):
        task = queue.claim_next(engine, "me")
        order.append(task.id)
        queue.finish(engine, task)  # one lane: each task ends before the next is claimed
    assert order == [a[0].id, b[0].id, a[1].id, b[1].id, a[2].id, b[2].id, demo.id]


def test_a_task_is_claimed_once_however_many_ask(engine):
    task = queue.enqueue(engine, "models", {})
    with ThreadPoolExecutor(8) as pool:
        claims = list(pool.map(lambda i: queue.claim(engine, task.id, f"worker-{i}"), range(8)))
    assert sum(c is not None for c in claims) == 1
    assert queue.get(engine, task.id).state == queue.RUNNING


def test_the_same_key_gives_the_same_task(engine):
    first = queue.enqueue(engine, "models", {"corpus_id": 1}, dedupe_key="models:1")
    again = queue.enqueue(engine, "models", {"corpus_id": 1}, dedupe_key="models:1")
    assert again.id == first.id


def test_tasks_of_a_dead_process_are_found_and_reclaimed_once(engine):
    mine, dead = queue.enqueue(engine, "ingest", {}), queue.enqueue(engine, "ingest", {})
    queue.claim(engine, mine.id, queue.process_name())  # this process: alive
    lost = queue.claim(engine, dead.id, DEAD_PROCESS)
    assert [t.id for t in queue.abandoned(engine)] == [dead.id]
    found = queue.abandoned(engine)[0]
    with ThreadPoolExecutor(4) as pool:  # several server processes recovering at once
        taken = list(pool.map(lambda _: queue.reclaim(engine, found, message="interrupted"), range(4)))
    assert taken.count(True) == 1
    ended = queue.get(engine, dead.id)
    assert ended.state == queue.FAILED and ended.message == "interrupted"
    assert queue.get(engine, mine.id).state == queue.RUNNING
    assert not queue.finish(engine, lost)  # the dead owner's lease is void
    assert queue.requeue_ended(engine, dead.id, {"attempt": 2})
    assert queue.get(engine, dead.id).state == queue.QUEUED and queue.get(engine, dead.id).params == {
        "attempt": 2
    }


def test_a_stale_owners_writes_after_its_task_was_reclaimed_change_nothing(engine):
    task = queue.enqueue(engine, "models", {"corpus_id": 1})
    first = queue.claim(engine, task.id, queue.process_name())
    age_heartbeat(engine, task.id, queue.STALE_AFTER.total_seconds() + 1)  # alive, but silent for 61 s
    (seen,) = queue.abandoned(engine)
    assert queue.reclaim(engine, seen, params={"corpus_id": 1, "attempt": 2})
    second = queue.claim(engine, task.id, "another-host:99")
    assert second is not None and second.owner != first.owner

    assert not queue.finish(engine, first)
    assert not queue.report(engine, first, "storing", 5, 10)
    assert not queue.fail(engine, first, "late failure")
    assert not queue.release(engine, first)
    now = queue.get(engine, task.id)
    assert (now.state, now.owner, now.stage, now.message) == (queue.RUNNING, second.owner, "starting", None)
    assert queue.finish(engine, second)
    assert queue.get(engine, task.id).state == queue.DONE


def test_a_late_failure_cannot_turn_a_finished_task_into_a_failed_one(engine):
    task = queue.claim(engine, queue.enqueue(engine, "ingest", {}).id, "me")
    assert queue.finish(engine, task, corpus_id=7)
    assert not queue.fail(engine, task, "too late")
    ended = queue.get(engine, task.id)
    assert (ended.state, ended.corpus_id, ended.message) == (queue.DONE, 7, None)


def test_an_owner_that_renewed_its_lease_keeps_its_task(engine):
    task = queue.claim(engine, queue.enqueue(engine, "models", {}).id, queue.process_name())
    age_heartbeat(engine, task.id, 61)
    (seen,) = queue.abandoned(engine)
    assert queue.renew(engine, task)  # the owner's heartbeat lands between the look and the reclaim
    assert not queue.reclaim(engine, seen, message="interrupted")
    assert queue.get(engine, task.id).state == queue.RUNNING


def test_the_heartbeat_advances_during_a_stage_without_progress(engine):
    task = queue.claim(engine, queue.enqueue(engine, "models", {}).id, queue.process_name())
    age_heartbeat(engine, task.id, 50)
    with queue.holding(engine, task, every=0.05) as lease:
        beats = []
        for _ in range(4):  # a long computation that reports nothing (fitting models, storing)
            time.sleep(0.15)
            beats.append(queue.get(engine, task.id).heartbeat_at)
        lease.check()
    assert beats == sorted(beats) and beats[0] < beats[-1]
    assert queue._now() - beats[-1] < timedelta(seconds=5)
    assert queue.abandoned(engine) == []


def test_the_heartbeat_notices_a_lost_lease_and_the_next_report_stops_the_work(engine):
    task = queue.claim(engine, queue.enqueue(engine, "ingest", {}).id, queue.process_name())
    with queue.holding(engine, task, every=0.05) as lease:
        age_heartbeat(engine, task.id, 61)
        assert queue.reclaim(engine, queue.abandoned(engine)[0], message="interrupted")
        deadline = time.monotonic() + 10
        while not lease.lost.is_set() and time.monotonic() < deadline:
            time.sleep(0.02)
        with pytest.raises(queue.LeaseLost):
            lease.report("counting", 1, 2)
    assert queue.get(engine, task.id).stage == queue.FAILED


def test_a_corpus_stored_by_a_task_that_lost_its_lease_is_rolled_back(engine):
    task = queue.claim(engine, queue.enqueue(engine, "ingest", {}).id, queue.process_name())
    stored = {}

    def store_in_task() -> None:  # the task's thread (the lease is known to this thread only)
        with queue.holding(engine, task):
            stored["ours"] = corpora.save_corpus(engine, record("while ours"))
            age_heartbeat(engine, task.id, 61)
            assert queue.reclaim(engine, queue.abandoned(engine)[0], message="interrupted")
            with pytest.raises(queue.LeaseLost):
                corpora.save_corpus(engine, record("after the task was taken"))

    with ThreadPoolExecutor(1) as pool:
        pool.submit(store_in_task).result()
    assert [c.name for c in corpora.list_corpora(engine)] == ["while ours"]
    assert corpora.save_corpus(engine, record("outside a task")) > stored["ours"]  # the command line


def test_queue_state_counts_and_the_oldest_wait(engine):
    assert queue.queue_state(engine) == queue.QueueState(0, 0, None)
    old = queue.enqueue(engine, "ingest", {})
    queue.enqueue(engine, "models", {})
    queue.claim(engine, queue.enqueue(engine, "models", {}).id, "me")
    with transaction(engine) as session:
        session.exec(
            update(BackgroundTask)
            .where(BackgroundTask.id == old.id)
            .values(created_at=queue._now() - timedelta(seconds=90))
        )
    state = queue.queue_state(engine)
    assert (state.running, state.queued) == (1, 2)
    assert 89 < state.oldest_queued_seconds < 120


def test_the_lane_for_small_tasks_takes_only_the_kinds_and_sizes_it_is_given(engine):
    queue.enqueue(engine, "ingest", {}, size_hint=5_000_000, priority=1)
    queue.enqueue(engine, "models", {}, size_hint=900_000)
    draft = queue.enqueue(engine, "ingest", {}, size_hint=2_000, priority=1)
    report = queue.enqueue(engine, "models", {}, size_hint=300)
    small = {"ingest": 256 * 1024, "models": 50_000}
    assert [queue.claim_next(engine, "small", small).id for _ in range(2)] == [draft.id, report.id]
    assert queue.claim_next(engine, "small", small) is None


def test_the_members_lanes_never_take_background_work_and_the_background_lane_only_that(engine):
    demo = queue.enqueue(engine, "ingest", {}, size_hint=1_000, priority=-1, member="demo")
    demo_report = queue.enqueue(engine, "models", {}, size_hint=300, priority=-1, member="demo")
    small = {"ingest": 256 * 1024, "models": 50_000}
    assert queue.claim_next(engine, "members", None, background=False) is None
    assert queue.claim_next(engine, "small", small, background=False) is None
    draft = queue.enqueue(engine, "ingest", {}, size_hint=2_000, priority=2, member="member 1")
    assert queue.claim_next(engine, "background", None, background=True).id == demo.id  # the draft not
    assert queue.claim_next(engine, "small", small, background=False).id == draft.id
    assert queue.claim_next(engine, "background", None, background=True).id == demo_report.id


def test_a_members_uploads_are_counted_before_that_members_new_reports(engine):
    # ingest tasks at the upload priority (2), the new corpora's reports at the new-report one (1)
    first_report = queue.enqueue(engine, "models", {}, size_hint=300, priority=1, member="member 1")
    uploads = [queue.enqueue(engine, "ingest", {"n": i}, priority=2, member="member 1") for i in range(3)]
    order = []
    for _ in range(4):
        task = queue.claim_next(engine, "me", background=False)
        order.append(task.id)
        queue.finish(engine, task)
    assert order == [*(u.id for u in uploads), first_report.id]
