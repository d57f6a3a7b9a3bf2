"""The task worker of a server process: a child process that runs background tasks from the store.

Each server process starts one (``TaskWorker``); any number of them may serve one store, each claiming
queued tasks safely (``app.store.tasks``). A worker has two lanes (threads): one takes any task, the other
only small ones (model reports and uploads up to ``SMALL_TASK_BYTES``), so that a colleague's draft is
counted and fitted while a large corpus is being ingested.

The worker runs at a lower CPU priority than its server (``TASK_NICENESS``), so that background work never
slows the pages down. It dies with its server: on Linux it asks the kernel for SIGTERM when its parent ends (even by
``kill -9``), and so do the counting processes it starts (``app.ingest.engines``). On SIGTERM it marks its
running uploads failed (removing their scratch), puts running model reports back in the queue, and exits at
once. Tasks of processes that died anyway are
failed by ``tasks.recover`` when a server starts.
"""

from __future__ import annotations

import logging
import multiprocessing
import os
import signal
import threading
from pathlib import Path

from app.ingest import scratch
from app.ingest.lifetime import die_with_parent
from app.services import modelling, tasks
from app.store import tasks as queue
from app.store.db import create_store_engine

SMALL_TASK_BYTES = 4 * 1024 * 1024
TASK_NICENESS = 10
"""How much lower than the server's the worker's CPU priority is (``nice``; its counting processes inherit
it): when pages and background tasks want the same cores, the pages are answered first, and the tasks use
whatever the pages leave (on an idle machine they run at full speed)."""
POLL_SECONDS = 0.1
STOP_SECONDS = 5.0

log = logging.getLogger("lexigrowth.worker")


def _lane(
    engine, work_dir: Path, owner: str, max_size: int | None, running: dict, stop: threading.Event
) -> None:
    lane = threading.current_thread().name
    while not stop.is_set():
        try:
            task = queue.claim_next(engine, owner, max_size)
        except Exception:  # noqa: BLE001 - a busy or restarting database: try again
            log.exception("cannot claim a task")
            stop.wait(1.0)
            continue
        if task is None:
            stop.wait(POLL_SECONDS)
            continue
        follow_ups: list[queue.TaskView] = []  # a new corpus's model report: fitted at once, in this lane
        while task is not None:
            running[lane] = task
            try:
                tasks.run(engine, task, work_dir, follow_ups.append)
            finally:
                running.pop(lane, None)
            # A member's new corpus is fitted at once; the demo corpora's reports wait behind uploads.
            task = (
                queue.claim(engine, follow_ups.pop(0).id, owner)
                if follow_ups and task.priority >= 0
                else None
            )


def worker_main(database_url: str, work_dir: str) -> None:
    """Entry point of the worker process."""
    die_with_parent()
    os.nice(TASK_NICENESS)
    logging.basicConfig(level=logging.INFO, format="%(levelname)s %(name)s: %(message)s")
    engine = create_store_engine(database_url)
    owner = queue.process_name()
    stop = threading.Event()
    running: dict[str, queue.TaskView] = {}

    def on_sigterm(_signum, _frame) -> None:
        scratch.remove_own(Path(work_dir))  # first: the type-id file of a count under way
        for task in list(running.values()):
            if task.kind == tasks.MODELS:  # the corpus is stored: its report is computed after the restart
                queue.requeue(engine, task.id, task.params)
                continue
            queue.fail(engine, task.id, "stopped: the server was shut down while this ran; try again")
            tasks.remove_scratch(task)
        os._exit(0)

    signal.signal(signal.SIGTERM, on_sigterm)
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C reaches the whole group: the server stops us
    modelling.warm_up()
    lanes = [
        threading.Thread(
            target=_lane, name=name, args=(engine, Path(work_dir), owner, size, running, stop), daemon=True
        )
        for name, size in (("any", None), ("small", SMALL_TASK_BYTES))
    ]
    for lane in lanes:
        lane.start()
    for lane in lanes:
        lane.join()


class TaskWorker:
    """The worker process of one server process (started with ``start``, ended with ``stop``)."""

    def __init__(self, database_url: str, work_dir: Path) -> None:
        context = multiprocessing.get_context("spawn")
        self.process = context.Process(
            target=worker_main, args=(database_url, str(work_dir)), name="lexigrowth-tasks", daemon=False
        )

    def start(self) -> None:
        self.process.start()

    def stop(self) -> None:
        if self.process.pid is None or not self.process.is_alive():
            return
        self.process.terminate()
        self.process.join(STOP_SECONDS)
        if self.process.is_alive():
            self.process.kill()
            self.process.join(1.0)
