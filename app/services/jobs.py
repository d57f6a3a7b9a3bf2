"""Jobs as the Upload page and the API see them: background tasks of the store, with their stage and
progress, submitted to this process's task worker (or run at once when there is none)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from sqlalchemy.engine import Engine

from app.services import modelling, tasks
from app.store import tasks as queue

STAGES = ("queued", "starting", "reading", "counting", "text-order statistics", "storing", "exact statistics")
"""The stages of an ingestion in order (then "done" or "failed"); the model report follows as its own task."""


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
            queue.requeue(self.engine, task.id, task.params)  # its report was replaced or removed since
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
