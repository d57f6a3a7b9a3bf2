"""Background tasks: what each kind does, and how a task is run (the store keeps their state).

Kinds:
- ``ingest``: count uploaded (or demo) files into a new corpus, then queue its model report. Its scratch
  folder, if any, is removed when it ends, whatever the outcome.
- ``models``: fit every model of a corpus with the backtests and the recommended ensemble; the result, or
  the reason no model could be fitted, is cached in the store once.

A server process runs them in its task worker (``app.services.worker``); the command line and the tests
run them at once in the calling thread (``run_now``). Either way the task row says what happened.
"""

from __future__ import annotations

import json
import logging
import shutil
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from sqlalchemy.engine import Engine

from app.config import DEMO_DIR
from app.ingest.profiles import BUILTIN_PROFILES, TokenizationProfile
from app.ingest.readers import TextSource
from app.services import exchange, ingestion, modelling
from app.store import accounts
from app.store import tasks as queue
from app.store.corpora import count_corpora

INGEST = "ingest"
MODELS = "models"
UPLOAD_PRIORITY = 1
"""A member's upload is counted before queued model reports of other corpora and before the demo corpora."""
DEMO_PRIORITY = -1
MODEL_ATTEMPTS = 2
"""Times a model report is started before a crash of its process counts as its failure."""
PROGRESS_EVERY = 0.25
"""Seconds between two progress reports written to the store."""

log = logging.getLogger("lexigrowth.tasks")


def models_key(corpus_id: int) -> str:
    return f"{MODELS}:{corpus_id}:{modelling.CACHE_KEY}"


def ingest_params(
    sources: list[tuple[Path, str]],
    name: str,
    labels: dict[str, str],
    profile: TokenizationProfile,
    *,
    scratch: Path | None = None,
    owner_id: int | None = None,
    source_kind: str = "text",
) -> dict[str, Any]:
    """What an ``ingest`` task needs: the files as (path, name shown), the corpus's name, labels and
    profile, the scratch folder to remove at the end, the member who will own the corpus and what the
    files hold (``source_kind``: text, word-counts, spectrum or bundle; see ``app.services.exchange``)."""
    return {
        "source_kind": source_kind,
        "sources": [[str(path), shown] for path, shown in sources],
        "name": name,
        "labels": labels,
        "profile": profile.to_dict(),
        "scratch": str(scratch) if scratch else None,
        "owner_id": owner_id,
    }


def queue_models(engine: Engine, corpus_id: int, priority: int = 0) -> queue.TaskView:
    """The model-report task of a corpus (queued now unless one exists for this code, ``modelling.CACHE_KEY``)."""
    return queue.enqueue(
        engine,
        MODELS,
        {"corpus_id": corpus_id},
        dedupe_key=models_key(corpus_id),
        corpus_id=corpus_id,
        priority=priority,
    )


def models_task(engine: Engine, corpus_id: int) -> queue.TaskView | None:
    return queue.find(engine, models_key(corpus_id))


class _Progress:
    """Writes (stage, done, total) to the task row, counting progress at most every ``PROGRESS_EVERY``
    seconds; the stages after counting keep the counted bytes (done = total)."""

    def __init__(self, engine: Engine, task_id: str) -> None:
        self.engine, self.task_id, self.last = engine, task_id, 0.0
        self.done = self.total = 0

    def stage(self, name: str) -> None:
        queue.report(self.engine, self.task_id, name, self.done, self.total)
        self.last = time.monotonic()

    def bytes(self, done: int, total: int) -> None:
        self.done, self.total = done, total
        if time.monotonic() - self.last >= PROGRESS_EVERY or done >= total:
            self.stage("counting")


def _run_ingest(engine: Engine, task: queue.TaskView, work_dir: Path, progress: _Progress) -> int:
    params = task.params
    progress.stage("reading")
    profile = TokenizationProfile.from_dict(params["profile"])
    kind = params.get("source_kind", "text")
    if kind != "text":
        corpus_id = exchange.ingest_counts(
            engine,
            kind,
            [(Path(path), shown) for path, shown in params["sources"]],
            params["name"],
            params["labels"],
            profile,
            progress=progress.bytes,
            on_stage=progress.stage,
        )
    else:
        sources = [TextSource.from_path(path, display_name=shown) for path, shown in params["sources"]]
        progress.bytes(0, sum(s.size for s in sources))
        corpus_id = ingestion.ingest(
            engine,
            sources,
            params["name"],
            params["labels"],
            profile,
            progress=progress.bytes,
            work_dir=work_dir,
            on_stage=progress.stage,
        )
    if params.get("owner_id") is not None:
        accounts.set_corpus_owner(engine, corpus_id, params["owner_id"])
    return corpus_id


def run(
    engine: Engine, task: queue.TaskView, work_dir: Path, after: Callable[[queue.TaskView], None]
) -> None:
    """Run a claimed task to its end and record the outcome; ``after`` receives each task queued by it
    (the model report of a new corpus)."""
    progress = _Progress(engine, task.id)
    try:
        if task.kind == INGEST:
            corpus_id = _run_ingest(engine, task, work_dir, progress)
            queue.finish(engine, task.id, corpus_id)
            after(queue_models(engine, corpus_id, min(task.priority, 0)))  # a demo's report waits its turn
        elif task.kind == MODELS:
            progress.stage("fitting models")
            modelling.compute_model_report(engine, int(task.params["corpus_id"]))
            queue.finish(engine, task.id)
        else:
            queue.fail(engine, task.id, f"unknown task kind {task.kind!r}")
    except ValueError as exc:  # input that cannot become a corpus (unreadable file, no words...): said as is
        queue.fail(engine, task.id, str(exc))
    except Exception as exc:  # noqa: BLE001 - recorded for the user; the worker goes on
        log.exception("task %s (%s) failed", task.id, task.kind)
        queue.fail(engine, task.id, f"{exc.__class__.__name__}: {exc}")
    finally:
        remove_scratch(task)


def remove_scratch(task: queue.TaskView) -> None:
    if task.kind == INGEST and task.params.get("scratch"):
        shutil.rmtree(task.params["scratch"], ignore_errors=True)


def run_now(engine: Engine, task: queue.TaskView, work_dir: Path) -> queue.TaskView:
    """Claim and run ``task`` (and what it queues) in this thread; the task as it ended."""
    owner = queue.process_name()
    pending = [task]
    while pending:
        current = queue.claim(engine, pending.pop(0).id, owner)
        if current is not None:
            run(engine, current, work_dir, pending.append)
    ended = queue.get(engine, task.id)
    assert ended is not None
    return ended


def recover(engine: Engine) -> list[queue.TaskView]:
    """Fail the tasks of processes that died while running them and remove their scratch; a model report
    (the corpus itself is stored) goes back to the queue, up to ``MODEL_ATTEMPTS`` times in all."""
    dead = queue.interrupted(engine)
    for task in dead:
        remove_scratch(task)
        if task.kind == MODELS and task.params.get("attempt", 1) < MODEL_ATTEMPTS:
            queue.requeue(engine, task.id, task.params | {"attempt": task.params.get("attempt", 1) + 1})
    return dead


def queue_demo_corpora(engine: Engine, demo_dir: Path = DEMO_DIR) -> list[queue.TaskView]:
    """Queue the synthetic demo corpora of the demo manifest for counting, once per store and only into an
    empty one (several server processes starting together queue each file once)."""
    manifest = demo_dir / "manifest.json"
    if count_corpora(engine) or not manifest.exists():
        return []
    return [
        queue.enqueue(
            engine,
            INGEST,
            ingest_params(
                [(demo_dir / entry["file"], entry["file"])],
                entry["name"],
                entry.get("labels", {}),
                BUILTIN_PROFILES["default"],
            ),
            dedupe_key=f"demo:{entry['file']}",
            size_hint=(demo_dir / entry["file"]).stat().st_size,
            priority=DEMO_PRIORITY,
        )
        for entry in json.loads(manifest.read_text(encoding="utf-8"))["corpora"]
    ]
