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
from app.store.corpora import count_corpora, get_corpus

INGEST = "ingest"
MODELS = "models"
UPLOAD_PRIORITY = 2
"""A member's upload is counted before that member's queued model reports and before the demo corpora."""
NEW_REPORT_PRIORITY = 1
"""The model report of a member's new corpus comes after that member's uploads still to count (uploads
first: each page of counts is there sooner, and ten uploads at once wait for no report), before reports a
page asks for again (0); other members' tasks are interleaved by fair shares (``app.store.tasks.claim_next``)."""
DEMO_PRIORITY = -1
"""Background work: the demo corpora and their reports, claimed only by the worker's background lane
(``app.services.worker``), after every member's work."""
ANONYMOUS = "anonymous"
DEMO = "demo"
"""The members of tasks without a lab member: the anonymous user (one member for fair shares) and the
demo corpora (background work, after everyone's)."""
MODEL_ATTEMPTS = 2
"""Times a model report is started before a crash of its process counts as its failure."""
PROGRESS_EVERY = 0.25
"""Seconds between two progress reports written to the store."""

log = logging.getLogger("lexigrowth.tasks")


def models_key(corpus_id: int) -> str:
    return f"{MODELS}:{corpus_id}:{modelling.CACHE_KEY}"


def member_of(owner_id: int | None) -> str:
    """Whom a task works for, for fair shares of the queue: a lab member, or the anonymous user (personal
    mode, the command line), who then counts as one member."""
    return ANONYMOUS if owner_id is None else f"member {owner_id}"


def ingest_params(
    sources: list[tuple[Path, str]],
    name: str,
    labels: dict[str, str],
    profile: TokenizationProfile,
    *,
    scratch: Path | None = None,
    owner_id: int | None = None,
    source_kind: str = "text",
    text_separator: str = "file",
) -> dict[str, Any]:
    """What an ``ingest`` task needs: the files as (path, name shown), the corpus's name, labels and
    profile, the scratch folder to remove at the end, the member who will own the corpus and what the
    files hold (``source_kind``: text, word-counts, spectrum or bundle; see ``app.services.exchange``) and,
    for texts, where the texts of a file end (``text_separator``, see ``app.ingest.texts``)."""
    return {
        "source_kind": source_kind,
        "sources": [[str(path), shown] for path, shown in sources],
        "name": name,
        "labels": labels,
        "profile": profile.to_dict(),
        "scratch": str(scratch) if scratch else None,
        "owner_id": owner_id,
        "text_separator": text_separator,
    }


def queue_upload(engine: Engine, params: dict[str, Any], size_bytes: int) -> queue.TaskView:
    """The ``ingest`` task of a member's upload (``params`` from ``ingest_params``)."""
    return queue.enqueue(
        engine,
        INGEST,
        params,
        size_hint=size_bytes,
        priority=UPLOAD_PRIORITY,
        member=member_of(params.get("owner_id")),
    )


def queue_models(engine: Engine, corpus_id: int, priority: int = 0) -> queue.TaskView:
    """The model-report task of a corpus (queued now unless one exists for this code, ``modelling.CACHE_KEY``), for the
    corpus's owner, with its tokens as size hint (small corpora's reports are claimed first)."""
    existing = models_task(engine, corpus_id)
    if existing is not None:
        return existing  # a read only, as in queue.enqueue
    corpus = get_corpus(engine, corpus_id)
    return queue.enqueue(
        engine,
        MODELS,
        {"corpus_id": corpus_id},
        dedupe_key=models_key(corpus_id),
        corpus_id=corpus_id,
        size_hint=corpus.tokens,
        priority=priority,
        member=DEMO if priority < 0 else member_of(corpus.owner_id),
    )


def models_task(engine: Engine, corpus_id: int) -> queue.TaskView | None:
    return queue.find(engine, models_key(corpus_id))


class _Progress:
    """Writes (stage, done, total) to the task row, counting progress at most every ``PROGRESS_EVERY``
    seconds; the stages after counting keep the counted bytes (done = total). Raises ``LeaseLost`` as soon
    as the task is no longer this process's, which stops the work."""

    def __init__(self, lease: queue.Lease) -> None:
        self.lease, self.last = lease, 0.0
        self.done = self.total = 0

    def stage(self, name: str) -> None:
        self.lease.report(name, self.done, self.total)
        self.last = time.monotonic()

    def bytes(self, done: int, total: int) -> None:
        self.done, self.total = done, total
        if time.monotonic() - self.last >= PROGRESS_EVERY or done >= total:
            self.stage("counting")
        else:
            self.lease.check()


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
            text_separator=params.get("text_separator"),
        )
    if params.get("owner_id") is not None:
        accounts.set_corpus_owner(engine, corpus_id, params["owner_id"])
    return corpus_id


def run(
    engine: Engine, task: queue.TaskView, work_dir: Path, after: Callable[[queue.TaskView], None]
) -> None:
    """Run a claimed task to its end and record the outcome; ``after`` receives each task queued by it
    (the model report of a new corpus).

    The task's lease is renewed by a heartbeat thread for as long as it runs. A run whose task was taken
    from this process meanwhile (taken for abandoned) stops at its next progress report and records
    nothing: a new corpus is stored only while the task is still ours (``app.store.tasks.confirm_in``, in
    the storing transaction), and a model report computed anyway is the same report of the same corpus
    (stored under its key, whoever computes it), while the task row keeps its new owner's outcome."""
    with queue.holding(engine, task) as lease:
        progress = _Progress(lease)
        try:
            if task.kind == INGEST:
                corpus_id = _run_ingest(engine, task, work_dir, progress)
                # The corpus is stored: its report is queued before the job says done, so that the job
                # never shows a corpus without the state of its models.
                priority = DEMO_PRIORITY if task.priority < 0 else NEW_REPORT_PRIORITY
                report = queue_models(engine, corpus_id, priority)
                if queue.finish(engine, task, corpus_id):
                    after(report)
            elif task.kind == MODELS:
                progress.stage("fitting models")
                modelling.compute_model_report(engine, int(task.params["corpus_id"]))
                queue.finish(engine, task)
            else:
                queue.fail(engine, task, f"unknown task kind {task.kind!r}")
        except queue.LeaseLost:
            log.warning(
                "task %s (%s) was taken from this process; it stopped, its outcome is its new owner's",
                task.id,
                task.kind,
            )
        except ValueError as exc:  # input that cannot become a corpus (unreadable file, no words...): as is
            queue.fail(engine, task, str(exc))
        except Exception as exc:  # noqa: BLE001 - recorded for the user; the worker goes on
            log.exception("task %s (%s) failed", task.id, task.kind)
            queue.fail(engine, task, f"{exc.__class__.__name__}: {exc}")
        finally:
            remove_scratch(task)


def remove_scratch(task: queue.TaskView) -> None:
    if task.kind == INGEST and task.params.get("scratch"):
        shutil.rmtree(task.params["scratch"], ignore_errors=True)


def run_now(engine: Engine, task: queue.TaskView, work_dir: Path) -> queue.TaskView:
    """Claim and run ``task`` (and what it queues) in this thread; the task as it ended."""
    process = queue.process_name()
    pending = [task]
    while pending:
        current = queue.claim(engine, pending.pop(0).id, process)
        if current is not None:
            run(engine, current, work_dir, pending.append)
    ended = queue.get(engine, task.id)
    assert ended is not None
    return ended


INTERRUPTED = (
    "interrupted: the process running this task stopped before it finished; nothing was stored, try again"
)


def recover(engine: Engine) -> list[queue.TaskView]:
    """Take back the tasks of processes that died (or froze) while running them and remove their scratch:
    an upload fails with a message, a model report (the corpus itself is stored) goes back to the queue,
    up to ``MODEL_ATTEMPTS`` times in all. Safe to run in several processes at once, as often as wanted:
    each abandoned task is recovered by exactly one of them (``queue.reclaim``). Returns those this call
    recovered."""
    recovered = []
    for task in queue.abandoned(engine):
        attempt = task.params.get("attempt", 1)
        if task.kind == MODELS and attempt < MODEL_ATTEMPTS:
            taken = queue.reclaim(engine, task, params=task.params | {"attempt": attempt + 1})
        else:
            taken = queue.reclaim(engine, task, message=INTERRUPTED)
        if taken:
            remove_scratch(task)
            recovered.append(task)
    return recovered


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
            member=DEMO,
        )
        for entry in json.loads(manifest.read_text(encoding="utf-8"))["corpora"]
    ]
