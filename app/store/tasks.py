"""Background tasks in the store: enqueue, claim fairly, hold a lease while running, finish, recover.

Claiming is one conditional UPDATE (``... WHERE id = :id AND state = 'queued'``): of several processes
that race for the same task exactly one sees its row changed, on SQLite (one writer at a time) and on
PostgreSQL (the second UPDATE waits for the first's row lock, then finds the state changed) alike.

A claim is a lease: the claimed task's ``owner`` is "host:pid/token", new for every claim, and every later
write of the claimant (progress, heartbeat, finish, fail, release) is conditional on ``owner`` being its own
and the state still ``running``. A claimant whose task was recovered meanwhile (taken for dead, failed or
queued again, claimed by another) is told so (False, or ``LeaseLost``) and changes nothing. While a task
runs, a heartbeat thread (``holding``) renews its lease every ``HEARTBEAT_EVERY`` whatever the stage, so only
a process that is gone (or frozen for ``STALE_AFTER``) loses its tasks.

Fair shares: a task works for a ``member`` (a lab member, the anonymous user, the demo); ``claim_next`` serves
the member with the fewest tasks running, then the one served longest ago (round robin), then by priority,
model reports of small corpora first, then the oldest. Background tasks (priority below 0, the demo corpora)
come after every member's; a lane may take only members' tasks or only background ones (``background``).
"""

from __future__ import annotations

import json
import os
import secrets
import socket
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any

from sqlalchemy import and_, case, func, or_, select, update
from sqlalchemy.engine import Engine
from sqlalchemy.exc import IntegrityError
from sqlmodel import Session

from app.processes import process_running
from app.store.db import transaction
from app.store.tables import BackgroundTask

QUEUED, RUNNING, DONE, FAILED = "queued", "running", "done", "failed"
STALE_AFTER = timedelta(seconds=60)
"""A running task whose owner has not renewed its lease for this long is taken for dead (its process is
gone or frozen)."""
HEARTBEAT_EVERY = 10.0
"""Seconds between two lease renewals of a running task: six chances before ``STALE_AFTER``."""
SERVED_WINDOW = timedelta(hours=1)
"""How far back a member's claims count for the round robin (older: served long ago, first in line)."""
MODELS_KIND = "models"
"""The kind whose size hint (tokens of the corpus) orders the queue: small corpora's model reports first."""


class LeaseLost(RuntimeError):
    """This process no longer owns the task it was running (it was recovered as abandoned, possibly taken
    by another process): it must stop and store nothing as the task's result."""

    def __init__(self, task_id: str) -> None:
        super().__init__(f"task {task_id} is no longer ours: it was taken for abandoned and recovered")
        self.task_id = task_id


def process_name() -> str:
    """ "host:pid" of this process, the start of the owner recorded on the tasks it runs."""
    return f"{socket.gethostname()}:{os.getpid()}"


def _lease_owner(process: str) -> str:
    return f"{process}/{secrets.token_hex(6)}"


@dataclass(frozen=True)
class TaskView:
    """A task as pages and the API show it (plain values); ``owner`` is the lease of a claimed task."""

    id: str
    kind: str
    state: str
    stage: str
    done: int
    total: int
    corpus_id: int | None
    message: str | None
    params: dict[str, Any]
    priority: int = 0
    owner: str | None = None
    member: str | None = None
    heartbeat_at: datetime | None = None

    @classmethod
    def of(cls, row: BackgroundTask) -> TaskView:
        return cls(
            row.id,
            row.kind,
            row.state,
            row.stage,
            int(row.done),
            int(row.total),
            row.corpus_id,
            row.message,
            json.loads(row.params_json),
            row.priority,
            row.owner,
            row.member,
            row.heartbeat_at,
        )

    @property
    def finished(self) -> bool:
        return self.state in (DONE, FAILED)


def _now() -> datetime:
    return datetime.now(UTC)


def enqueue(
    engine: Engine,
    kind: str,
    params: dict[str, Any] | None = None,
    *,
    dedupe_key: str | None = None,
    corpus_id: int | None = None,
    size_hint: int = 0,
    priority: int = 0,
    member: str | None = None,
) -> TaskView:
    """A new queued task, or the existing task with the same ``dedupe_key`` (whatever its state). The order
    in which queued tasks are claimed: see ``claim_next``."""
    if dedupe_key is not None and (existing := find(engine, dedupe_key)) is not None:
        return existing  # a read only: pages that ask for a pending report again write nothing
    row = BackgroundTask(
        id=secrets.token_urlsafe(12),
        kind=kind,
        dedupe_key=dedupe_key,
        corpus_id=corpus_id,
        size_hint=size_hint,
        priority=priority,
        member=member,
        params_json=json.dumps(params or {}),
    )
    try:
        with transaction(engine) as session:
            session.add(row)
            session.flush()
            return TaskView.of(row)
    except IntegrityError:  # another process inserted the same key between the look and the insert
        if dedupe_key is None:
            raise
    existing = find(engine, dedupe_key)
    assert existing is not None, f"task {dedupe_key!r} vanished"
    return existing


def get(engine: Engine, task_id: str) -> TaskView | None:
    with Session(engine) as session:
        row = session.get(BackgroundTask, task_id)
        return None if row is None else TaskView.of(row)


def find(engine: Engine, dedupe_key: str) -> TaskView | None:
    with Session(engine) as session:
        row = session.exec(select(BackgroundTask).where(BackgroundTask.dedupe_key == dedupe_key)).scalar()
        return None if row is None else TaskView.of(row)


def unfinished(engine: Engine, kind: str) -> list[TaskView]:
    """Queued and running tasks of ``kind``, oldest first."""
    with Session(engine) as session:
        rows = session.exec(
            select(BackgroundTask)
            .where(BackgroundTask.kind == kind, BackgroundTask.state.in_((QUEUED, RUNNING)))
            .order_by(BackgroundTask.created_at)
        ).scalars()
        return [TaskView.of(row) for row in rows]


@dataclass(frozen=True)
class QueueState:
    """How the queue of the whole store stands: tasks running, tasks queued and the oldest one's wait."""

    running: int
    queued: int
    oldest_queued_seconds: float | None


def queue_state(engine: Engine) -> QueueState:
    with Session(engine) as session:
        running = session.exec(
            select(func.count()).select_from(BackgroundTask).where(BackgroundTask.state == RUNNING)
        ).scalar()
        queued, oldest = session.exec(
            select(func.count(), func.min(BackgroundTask.created_at)).where(BackgroundTask.state == QUEUED)
        ).one()
    if isinstance(oldest, str):  # SQLite returns the aggregate as stored text, without the column's type
        oldest = datetime.fromisoformat(oldest)
    if oldest is not None and oldest.tzinfo is None:
        oldest = oldest.replace(tzinfo=UTC)
    waited = None if oldest is None else max(0.0, (_now() - oldest).total_seconds())
    return QueueState(int(running or 0), int(queued or 0), waited)


def claim(engine: Engine, task_id: str, process: str) -> TaskView | None:
    """Take the queued task ``task_id`` for ``process`` (its lease is the returned view's ``owner``); None
    when it is not queued (any more)."""
    now = _now()
    owner = _lease_owner(process)
    with transaction(engine) as session:
        claimed = session.exec(
            update(BackgroundTask)
            .where(BackgroundTask.id == task_id, BackgroundTask.state == QUEUED)
            .values(
                state=RUNNING, stage="starting", owner=owner, heartbeat_at=now, claimed_at=now, updated_at=now
            )
        ).rowcount
    return get(engine, task_id) if claimed == 1 else None


def _next_candidate(
    session: Session, max_sizes: dict[str, int] | None, background: bool | None
) -> str | None:
    """The queued task to claim next (see the module's docstring for the order)."""
    if session.exec(select(BackgroundTask.id).where(BackgroundTask.state == QUEUED).limit(1)).first() is None:
        return None  # the usual answer of an idle worker's look, by the index on state alone
    recent = (
        select(
            BackgroundTask.member.label("member"),
            func.sum(case((BackgroundTask.state == RUNNING, 1), else_=0)).label("running"),
            func.max(BackgroundTask.claimed_at).label("served"),
        )
        .where(
            or_(BackgroundTask.state == RUNNING, BackgroundTask.claimed_at > _now() - SERVED_WINDOW),
            BackgroundTask.member.is_not(None),
        )
        .group_by(BackgroundTask.member)
        .subquery()
    )
    query = (
        select(BackgroundTask.id)
        .outerjoin(recent, recent.c.member == BackgroundTask.member)
        .where(BackgroundTask.state == QUEUED)
    )
    if background is not None:
        query = query.where(BackgroundTask.priority < 0 if background else BackgroundTask.priority >= 0)
    if max_sizes is not None:
        query = query.where(
            or_(
                *(
                    and_(BackgroundTask.kind == kind, BackgroundTask.size_hint <= most)
                    for kind, most in max_sizes.items()
                )
            )
        )
    query = query.order_by(
        case((BackgroundTask.priority < 0, 1), else_=0),  # the demo corpora after every member's work
        func.coalesce(recent.c.running, 0),  # the member with the fewest tasks running
        case((recent.c.served.is_(None), 0), else_=1),  # then one not served lately
        recent.c.served,  # then the one served longest ago
        BackgroundTask.priority.desc(),
        case((BackgroundTask.kind == MODELS_KIND, BackgroundTask.size_hint), else_=0),
        BackgroundTask.created_at,
    )
    return session.exec(query.limit(1)).scalar()


def claim_next(
    engine: Engine, process: str, max_sizes: dict[str, int] | None = None, background: bool | None = None
) -> TaskView | None:
    """Take the next queued task for ``process``; None if none. With ``max_sizes`` ({kind: largest size
    hint}), only a task of one of those kinds and sizes; with ``background`` True only a background task
    (priority below 0), False only a member's (0 and above), None either.

    Order: tasks of priority 0 and above before background ones (below 0); among them the member with the
    fewest tasks running, then the one whose last claim is oldest (or who has none within
    ``SERVED_WINDOW``), so that one member's many uploads delay another's by one task at most; then higher
    priority; then model reports of smaller corpora; then the oldest."""
    for _ in range(5):  # another process may take the candidate between the look and the claim
        with Session(engine) as session:
            candidate = _next_candidate(session, max_sizes, background)
        if candidate is None:
            return None
        claimed = claim(engine, candidate, process)
        if claimed is not None:
            return claimed
    return None


def _held(task: TaskView):
    """The condition of every write by the claimant of ``task``: still its owner, still running."""
    return and_(
        BackgroundTask.id == task.id, BackgroundTask.owner == task.owner, BackgroundTask.state == RUNNING
    )


def _write_held(engine: Engine, task: TaskView, **values: Any) -> bool:
    with transaction(engine) as session:
        return session.exec(update(BackgroundTask).where(_held(task)).values(**values)).rowcount == 1


def report(engine: Engine, task: TaskView, stage: str, done: int = 0, total: int = 0) -> bool:
    """Progress of a running task (also renews its lease); False when ``task`` is no longer ours."""
    now = _now()
    return _write_held(engine, task, stage=stage, done=done, total=total, heartbeat_at=now, updated_at=now)


def renew(engine: Engine, task: TaskView) -> bool:
    """The heartbeat alone; False when ``task`` is no longer ours."""
    return _write_held(engine, task, heartbeat_at=_now())


def finish(engine: Engine, task: TaskView, corpus_id: int | None = None) -> bool:
    """Mark our running task done; False (and nothing changed) when it is no longer ours."""
    values: dict[str, Any] = {"state": DONE, "stage": DONE, "updated_at": _now()}
    if corpus_id is not None:
        values["corpus_id"] = corpus_id
    return _write_held(engine, task, **values)


def fail(engine: Engine, task: TaskView, message: str) -> bool:
    """Mark our running task failed with ``message``; False (nothing changed) when it is no longer ours, so
    a late failure never overwrites the outcome of a task that another process finished."""
    return _write_held(engine, task, state=FAILED, stage=FAILED, message=message[:2000], updated_at=_now())


def release(engine: Engine, task: TaskView, params: dict[str, Any] | None = None) -> bool:
    """Put our running task back in the queue (a model report of a server that stops); False when it is no
    longer ours."""
    return _write_held(engine, task, **_queued_again(params if params is not None else task.params))


def _queued_again(params: dict[str, Any]) -> dict[str, Any]:
    return {
        "state": QUEUED,
        "stage": QUEUED,
        "message": None,
        "owner": None,
        "params_json": json.dumps(params),
        "updated_at": _now(),
    }


def requeue_ended(engine: Engine, task_id: str, params: dict[str, Any]) -> bool:
    """Queue a task that ended (done or failed) again with new parameters, e.g. a model report whose
    stored result was removed since; a queued or running task is left as it is (False)."""
    with transaction(engine) as session:
        return (
            session.exec(
                update(BackgroundTask)
                .where(BackgroundTask.id == task_id, BackgroundTask.state.in_((DONE, FAILED)))
                .values(**_queued_again(params))
            ).rowcount
            == 1
        )


def _owner_gone(owner: str | None, heartbeat: datetime | None, now: datetime) -> bool:
    """Whether the process that claimed a task can no longer be running it: no heartbeat for
    ``STALE_AFTER``, or (a process of this machine) its pid no longer exists."""
    if heartbeat is None or now - heartbeat > STALE_AFTER:
        return True
    host, _, pid = (owner or "").partition("/")[0].rpartition(":")
    if host != socket.gethostname() or not pid.isdigit():
        return False  # another machine's process: trust its heartbeat
    return not process_running(int(pid))


def abandoned(engine: Engine) -> list[TaskView]:
    """Running tasks whose process is gone (candidates for ``reclaim``)."""
    now = _now()
    with Session(engine) as session:
        running = session.exec(select(BackgroundTask).where(BackgroundTask.state == RUNNING)).scalars().all()
        return [TaskView.of(r) for r in running if _owner_gone(r.owner, r.heartbeat_at, now)]


def reclaim(
    engine: Engine,
    task: TaskView,
    *,
    message: str | None = None,
    params: dict[str, Any] | None = None,
    done: bool = False,
) -> bool:
    """Take an abandoned task (as seen by ``abandoned``) from its owner: failed with ``message``, queued
    again with ``params``, or ``done``. Conditional on the same lease and no heartbeat since, so that of
    several processes recovering at once exactly one succeeds (True), and an owner that renewed its lease
    meanwhile keeps its task."""
    if done:
        values: dict[str, Any] = {"state": DONE, "stage": DONE, "updated_at": _now()}
    elif params is not None:
        values = _queued_again(params)
    else:
        values = {"state": FAILED, "stage": FAILED, "message": (message or "")[:2000], "updated_at": _now()}
    no_beat_since = (
        BackgroundTask.heartbeat_at.is_(None)
        if task.heartbeat_at is None
        else or_(BackgroundTask.heartbeat_at.is_(None), BackgroundTask.heartbeat_at <= task.heartbeat_at)
    )
    with transaction(engine) as session:
        return (
            session.exec(update(BackgroundTask).where(_held(task), no_beat_since).values(**values)).rowcount
            == 1
        )


# ------------------------------------------------------------------------------------- the lease in use

_current: ContextVar[TaskView | None] = ContextVar("lexigrowth_task", default=None)


class Lease:
    """The running task of this thread, renewed by a heartbeat thread (see ``holding``)."""

    def __init__(self, engine: Engine, task: TaskView) -> None:
        self.engine, self.task = engine, task
        self.lost = threading.Event()

    def check(self) -> None:
        """Raise ``LeaseLost`` when the heartbeat found the task no longer ours."""
        if self.lost.is_set():
            raise LeaseLost(self.task.id)

    def report(self, stage: str, done: int = 0, total: int = 0) -> None:
        """Progress; raises ``LeaseLost`` (the work must stop) when the task is no longer ours."""
        self.check()
        if not report(self.engine, self.task, stage, done, total):
            self.lost.set()
            raise LeaseLost(self.task.id)


def _beat(lease: Lease, stop: threading.Event, every: float) -> None:
    while not stop.wait(every):
        try:
            if not renew(lease.engine, lease.task):
                lease.lost.set()
                return
        except Exception:  # noqa: BLE001 - a busy or restarting database: try again at the next beat
            continue


@contextmanager
def holding(engine: Engine, task: TaskView, every: float | None = None) -> Iterator[Lease]:
    """Run ``task`` (claimed by this process) in this thread: its lease is renewed every ``every`` seconds
    (by default ``HEARTBEAT_EVERY``) by a thread of its own for as long as the block lasts, and
    ``confirm_in`` knows it."""
    every = HEARTBEAT_EVERY if every is None else every
    lease = Lease(engine, task)
    stop = threading.Event()
    beat = threading.Thread(target=_beat, args=(lease, stop, every), name=f"lease-{task.id}", daemon=True)
    token = _current.set(task)
    beat.start()
    try:
        yield lease
    finally:
        stop.set()
        beat.join()
        _current.reset(token)


def confirm_in(session: Session) -> None:
    """Inside the transaction that stores a task's result (a new corpus): when this thread runs a task,
    renew its lease in the same transaction, or raise ``LeaseLost`` so that the transaction is rolled back
    and a process that lost its task stores nothing. Outside a task (the command line), nothing."""
    task = _current.get()
    if task is None:
        return
    renewed = session.exec(update(BackgroundTask).where(_held(task)).values(heartbeat_at=_now())).rowcount
    if renewed != 1:
        raise LeaseLost(task.id)
