"""Jobs as the Upload page and the API see them: background tasks of the store, with their stage and
progress, submitted to this process's task worker (or run at once when there is none)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from sqlalchemy.engine import Engine

from app.services import modelling, tasks
from app.services.worker import TaskWorker
from app.store import tasks as queue

QUEUE_STALL_SECONDS = 30.0
"""A queued task that has waited this long while no task runs anywhere means nothing is being processed."""
WORKER_SILENT_SECONDS = 30.0
"""A worker that has given no sign of life for this long (or none this long after its start) is stuck."""
STAGES = ("queued", "starting", "reading", "counting", "text-order statistics", "exact statistics", "storing")
"""The stages of an ingestion in order (then "done" or "failed"); the model report follows as its own task."""

Task = queue.TaskView
"""A background task as the store last saw it: id, kind, state, stage, progress, message, its corpus."""


def failed(task: Task) -> bool:
    """Whether the task ended without its result (``task.message`` says why)."""
    return task.state == queue.FAILED


def succeeded(task: Task) -> bool:
    """Whether the task ended with its result stored."""
    return task.state == queue.DONE


def as_job(task: queue.TaskView, models: queue.TaskView | None = None) -> dict[str, Any]:
    """The job's JSON: state (``status``), stage, bytes counted of all, the corpus once it exists and the
    state of its model report."""
    share = task.done / task.total if task.total else (1.0 if task.state == queue.DONE else 0.0)
    return {
        "id": task.id,
        "kind": task.kind,
        "status": task.state,
        "stage": task.stage,
        "done_bytes": task.done,
        "total_bytes": task.total,
        "progress": round(min(share, 1.0), 4),
        "corpus_id": task.corpus_id,
        "corpus_url": f"/corpora/{task.corpus_id}" if task.corpus_id is not None else None,
        "models": None if models is None else {"status": models.state, "error": models.message},
        "error": task.message if task.state == queue.FAILED else None,
    }


class Dispatcher:
    """Hands new tasks to the task worker of this server process, or runs them at once in the caller's
    thread when the server has no worker (``LEXIGROWTH_TASK_WORKER=0``: tests, embedded use)."""

    def __init__(self, engine: Engine, work_dir: Path, inline: bool) -> None:
        self.engine, self.work_dir, self.inline = engine, work_dir, inline

    def submit(self, task: queue.TaskView) -> queue.TaskView:
        return tasks.run_now(self.engine, task, self.work_dir) if self.inline else task

    def current(self, task: Task) -> Task:
        """The task as the store sees it now (as it was if it has since been removed)."""
        return queue.get(self.engine, task.id) or task

    def job(self, task_id: str) -> dict[str, Any] | None:
        task = queue.get(self.engine, task_id)
        if task is None:
            return None
        models = tasks.models_task(self.engine, task.corpus_id) if task.corpus_id is not None else None
        return as_job(task, models)

    def models_state(self, corpus_id: int) -> queue.TaskView:
        """The model task of a corpus whose report is missing, queued if there is none (a store made by an
        earlier version, a task lost with its process)."""
        task = tasks.queue_models(self.engine, corpus_id)
        if task.state == queue.DONE and not modelling.has_model_report(self.engine, corpus_id):
            queue.requeue_ended(self.engine, task.id, task.params)  # its report was replaced or removed since
            task = queue.get(self.engine, task.id) or task
        return self.submit(task)

    def models_status(self, corpus_id: int) -> dict[str, Any]:
        """{"status": "ready" | "queued" | "running" | "failed", "error": the reason of a failure}."""
        stamp = modelling.report_stamps(self.engine, [corpus_id]).get(corpus_id)
        if stamp is None:
            task = self.models_state(corpus_id)
            if task.state != queue.DONE:
                return {"status": task.state, "error": task.message}
        elif stamp[1]:  # a stored failure: only now is the report read, for its reason
            try:
                modelling.model_report(self.engine, corpus_id)
            except modelling.PredictionError as exc:
                return {"status": queue.FAILED, "error": str(exc)}
        return {"status": "ready", "error": None}

    def uploads_under_way(self) -> list[dict[str, Any]]:
        """Uploads (and demo corpora) being counted, oldest first, with the name of their corpus-to-be."""
        return [
            as_job(task) | {"name": task.params.get("name")}
            for task in queue.unfinished(self.engine, tasks.INGEST)
        ]

    def health(self, worker: TaskWorker | None) -> dict[str, Any]:
        """``{"status": "ok"}`` when tasks are processed, else ``"degraded"`` with ``problems`` in words; with
        the state of this server process's task worker (``None`` when tasks run in the requesting thread)
        and of the store's queue (shared by every server process)."""
        problems = []
        worker_state = None
        if worker is not None:
            state = worker.state()
            worker_state = {
                "scope": "this server process",
                "alive": state.alive,
                "pid": state.pid,
                "restarts": state.restarts,
                "last_seen_seconds": state.last_seen_seconds,
            }
            silent = state.last_seen_seconds if state.last_seen_seconds is not None else state.running_seconds
            if not state.alive:
                problems.append(
                    "the task worker of this server process is not running; it is being restarted"
                )
            elif silent > WORKER_SILENT_SECONDS:
                problems.append(f"the task worker of this server process has not answered for {silent:.0f} s")
        standing = queue.queue_state(self.engine)
        waited = standing.oldest_queued_seconds
        if waited is not None and waited > QUEUE_STALL_SECONDS and standing.running == 0:
            problems.append(f"the oldest queued task has waited {waited:.0f} s and no task is running")
        return {
            "status": "degraded" if problems else "ok",
            "problems": problems,
            "worker": worker_state,
            "queue": {
                "running": standing.running,
                "queued": standing.queued,
                "oldest_queued_seconds": None if waited is None else round(waited, 1),
            },
        }
