"""Background tasks in the store: enqueue, claim, report progress, finish, and recover after a crash.

Claiming is one conditional UPDATE (``... WHERE id = :id AND state = 'queued'``): of several processes
that race for the same task exactly one sees its row changed, on SQLite (one writer at a time) and on
PostgreSQL (the second UPDATE waits for the first's row lock, then finds the state changed) alike.
"""

from __future__ import annotations

import json
import os
import secrets
import socket
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any

from sqlalchemy import select, update
from sqlalchemy.engine import Engine
from sqlalchemy.exc import IntegrityError
from sqlmodel import Session

from app.store.db import transaction
from app.store.tables import BackgroundTask

QUEUED, RUNNING, DONE, FAILED = "queued", "running", "done", "failed"
STALE_AFTER = timedelta(seconds=60)
"""A running task whose owner has not reported for this long is taken for dead (its process is gone)."""


def process_name() -> str:
    """ "host:pid" of this process, the owner recorded on the tasks it runs."""
    return f"{socket.gethostname()}:{os.getpid()}"


@dataclass(frozen=True)
class TaskView:
    """A task as pages and the API show it (plain values)."""

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
) -> TaskView:
    """A new queued task, or the existing task with the same ``dedupe_key`` (whatever its state). Tasks of
    higher ``priority`` are claimed first, then the oldest."""
    if dedupe_key is not None and (existing := find(engine, dedupe_key)) is not None:
        return existing  # a read only: pages that ask for a pending report again write nothing
    row = BackgroundTask(
        id=secrets.token_urlsafe(12),
        kind=kind,
        dedupe_key=dedupe_key,
        corpus_id=corpus_id,
        size_hint=size_hint,
        priority=priority,
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


def claim(engine: Engine, task_id: str, owner: str) -> TaskView | None:
    """Take the queued task ``task_id`` for ``owner``; None when it is not queued (any more)."""
    now = _now()
    with transaction(engine) as session:
        claimed = session.exec(
            update(BackgroundTask)
            .where(BackgroundTask.id == task_id, BackgroundTask.state == QUEUED)
            .values(state=RUNNING, stage="starting", owner=owner, heartbeat_at=now, updated_at=now)
        ).rowcount
    return get(engine, task_id) if claimed == 1 else None


def claim_next(engine: Engine, owner: str, max_size: int | None = None) -> TaskView | None:
    """Take the queued task of highest priority, then the oldest (of at most ``max_size`` by its size hint),
    for ``owner``; None if none."""
    for _ in range(5):  # another process may take the candidate between the look and the claim
        with Session(engine) as session:
            query = select(BackgroundTask.id).where(BackgroundTask.state == QUEUED)
            if max_size is not None:
                query = query.where(BackgroundTask.size_hint <= max_size)
            candidate = session.exec(
                query.order_by(BackgroundTask.priority.desc(), BackgroundTask.created_at).limit(1)
            ).scalar()
        if candidate is None:
            return None
        claimed = claim(engine, candidate, owner)
        if claimed is not None:
            return claimed
    return None


def report(engine: Engine, task_id: str, stage: str, done: int = 0, total: int = 0) -> None:
    """Progress of a running task (also its heartbeat)."""
    now = _now()
    with transaction(engine) as session:
        session.exec(
            update(BackgroundTask)
            .where(BackgroundTask.id == task_id)
            .values(stage=stage, done=done, total=total, heartbeat_at=now, updated_at=now)
        )


def finish(engine: Engine, task_id: str, corpus_id: int | None = None) -> None:
    values: dict[str, Any] = {"state": DONE, "stage": DONE, "updated_at": _now()}
    if corpus_id is not None:
        values["corpus_id"] = corpus_id
    with transaction(engine) as session:
        session.exec(update(BackgroundTask).where(BackgroundTask.id == task_id).values(**values))


def fail(engine: Engine, task_id: str, message: str) -> None:
    with transaction(engine) as session:
        session.exec(
            update(BackgroundTask)
            .where(BackgroundTask.id == task_id)
            .values(state=FAILED, stage=FAILED, message=message[:2000], updated_at=_now())
        )


def requeue(engine: Engine, task_id: str, params: dict[str, Any]) -> None:
    """Put a task back in the queue with new parameters (a retry after its process died)."""
    with transaction(engine) as session:
        session.exec(
            update(BackgroundTask)
            .where(BackgroundTask.id == task_id)
            .values(
                state=QUEUED,
                stage=QUEUED,
                message=None,
                owner=None,
                params_json=json.dumps(params),
                updated_at=_now(),
            )
        )


def _owner_gone(owner: str | None, heartbeat: datetime | None, now: datetime) -> bool:
    """Whether the process that claimed a task can no longer be running it."""
    if heartbeat is None or now - heartbeat > STALE_AFTER:
        return True
    host, _, pid = (owner or "").rpartition(":")
    if host != socket.gethostname() or not pid.isdigit():
        return False  # another machine's process: trust its heartbeat
    try:
        os.kill(int(pid), 0)
    except ProcessLookupError:
        return True
    except PermissionError:
        return False
    return False


def interrupted(engine: Engine) -> list[TaskView]:
    """Mark running tasks whose process has died as failed (with a message); return them (their scratch
    is the caller's to remove)."""
    now = _now()
    with Session(engine) as session:
        running = session.exec(select(BackgroundTask).where(BackgroundTask.state == RUNNING)).scalars().all()
        dead = [TaskView.of(r) for r in running if _owner_gone(r.owner, r.heartbeat_at, now)]
    for task in dead:
        fail(
            engine,
            task.id,
            "interrupted: the server process running this task stopped before it finished; nothing was "
            "stored, try again",
        )
    return dead
