"""The task worker of a server process: a child process that runs background tasks from the store, and the
supervisor that keeps it running.

Each server process starts one (``TaskWorker``); any number of them may serve one store, each claiming
queued tasks safely and fairly (``app.store.tasks``). A worker has three lanes (threads, ``LANES``): two
for the members' tasks, one of any size and one for small ones only (``SMALL_TASKS``), so that a
colleague's draft is counted and fitted at once while large corpora are being ingested and fitted (it waits
for one small task at most); and one for background work (the demo corpora), which the members' lanes
never take, so that a member's upload never waits behind it.

The whole worker process, every thread included (the numerical libraries start theirs when they are
imported), runs at a lower CPU priority than its server (``TASK_NICENESS``), so that background work never
slows the pages down; the background lane, and the counting processes it starts, lower still
(``BACKGROUND_NICENESS``), so that the members' tasks take the cores first. It dies with its server: on
Linux it asks the kernel for SIGTERM when its parent ends
(even by ``kill -9``), and so do the counting processes it starts (``app.ingest.engines``). On SIGTERM it
marks its running uploads failed (removing their scratch), puts running model reports back in the queue,
and exits at once.

The server process supervises it: a thread checks every ``SUPERVISE_EVERY`` seconds that the worker is
alive and starts a new one when it is not (waiting longer each time one dies young), and recovers the tasks
of processes that died (``tasks.recover``) at once after a worker's death and every ``RECOVER_EVERY``
seconds anyway (any server process of the store may recover any process's tasks, exactly once each).
"""

from __future__ import annotations

import logging
import multiprocessing
import os
import signal
import threading
import time
from dataclasses import dataclass
from pathlib import Path

from sqlalchemy.engine import Engine

from app.ingest import scratch
from app.processes import die_with_parent
from app.services import modelling, tasks
from app.store import tasks as queue
from app.store.db import create_store_engine

SMALL_TASKS = {tasks.INGEST: 256 * 1024, tasks.MODELS: 50_000}
"""What the lane for small tasks takes: uploads of up to 256 KiB (size hint in bytes) and model reports of
corpora of up to 50,000 tokens (size hint in tokens): each done within a second or two, so that a draft
never waits long for this lane."""
TASK_NICENESS = 10
"""How much lower than the server's the worker's CPU priority is (``nice``; its counting processes inherit
it): when pages and background tasks want the same cores, the pages are answered first, and the tasks use
whatever the pages leave (on an idle machine they run at full speed)."""
BACKGROUND_NICENESS = 19
"""The nice value of the background lane (the lowest priority; sched(7)): while a member's task wants the
cores, the demo corpora get about a seventh of the CPU time of that task (nice 10 weighs 110, nice 19 weighs
15 in the kernel's scheduler), and all of it otherwise."""
LANES = (("members", None, False), ("small", SMALL_TASKS, False), ("background", None, True))
"""The lanes: (name, the kinds and largest sizes it takes or None for any, ``background``: True for
background tasks only, False for the members' only; see ``app.store.tasks.claim_next``)."""
POLL_SECONDS = 0.1
STOP_SECONDS = 5.0
SIGN_OF_LIFE_EVERY = 1.0
"""Seconds between two signs of life of a worker to its supervisor."""
SUPERVISE_EVERY = 1.0
RECOVER_EVERY = 15.0
RESTART_BACKOFF = (1.0, 60.0)
"""Wait before starting a worker again: the first, doubled for each worker that died within
``YOUNG_DEATH`` seconds of its start, at most the second."""
YOUNG_DEATH = 30.0

log = logging.getLogger("lexigrowth.worker")


def lower_priority(niceness: int = TASK_NICENESS) -> int:
    """Lower the CPU priority of this whole process by ``niceness``; the new nice value.

    On Linux ``nice``/``setpriority`` of the process id change only the calling thread (sched(7): the nice
    value is a per-thread attribute), and the numerical libraries have started their threads by now, so each
    thread of /proc/self/task is set; threads started later inherit it from the thread that starts them."""
    target = min(19, os.getpriority(os.PRIO_PROCESS, 0) + niceness)
    threads = Path("/proc/self/task")
    if not threads.is_dir():  # elsewhere the nice value belongs to the process
        os.setpriority(os.PRIO_PROCESS, 0, target)
        return target
    for _ in range(2):  # a thread started while the first pass ran is caught by the second
        for tid in os.listdir(threads):
            try:
                os.setpriority(os.PRIO_PROCESS, int(tid), target)
            except ProcessLookupError:
                continue  # ended meanwhile
    return target


def _lane(
    engine,
    work_dir: Path,
    process: str,
    max_sizes: dict | None,
    background: bool,
    running: dict,
    stop: threading.Event,
) -> None:
    lane = threading.current_thread().name
    if background:
        _this_thread_in_background()
    while not stop.is_set():
        try:
            task = queue.claim_next(engine, process, max_sizes, background)
        except Exception:  # noqa: BLE001 - a busy or restarting database: try again
            log.exception("cannot claim a task")
            stop.wait(1.0)
            continue
        if task is None:
            stop.wait(POLL_SECONDS)
            continue
        running[lane] = task
        try:
            # A new corpus's model report is queued (after its member's uploads still to count) and taken
            # from the queue in fair order like any other task.
            tasks.run(engine, task, work_dir, lambda _report: None)
        finally:
            running.pop(lane, None)


def _this_thread_in_background() -> None:
    """This thread, and the threads and processes it starts, at ``BACKGROUND_NICENESS`` (sched(7): the nice
    value of a thread of its own)."""
    if hasattr(os, "setpriority"):
        os.setpriority(os.PRIO_PROCESS, threading.get_native_id(), BACKGROUND_NICENESS)


def _warm_up() -> None:
    _this_thread_in_background()
    modelling.warm_up()


def worker_main(database_url: str, work_dir: str, seen) -> None:
    """Entry point of the worker process; ``seen`` (a shared double) receives its signs of life."""
    die_with_parent()
    lower_priority()
    logging.basicConfig(level=logging.INFO, format="%(levelname)s %(name)s: %(message)s")
    engine = create_store_engine(database_url)
    process = queue.process_name()
    stop = threading.Event()
    running: dict[str, queue.TaskView] = {}

    def on_sigterm(_signum, _frame) -> None:
        scratch.remove_own(Path(work_dir))  # first: the type-id file of a count under way
        for task in list(running.values()):
            if task.kind == tasks.MODELS:  # the corpus is stored: its report is computed after the restart
                queue.release(engine, task)
                continue
            queue.fail(engine, task, "stopped: the server was shut down while this ran; try again")
            tasks.remove_scratch(task)
        os._exit(0)

    signal.signal(signal.SIGTERM, on_sigterm)
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C reaches the whole group: the server stops us
    lanes = [
        threading.Thread(
            target=_lane,
            name=name,
            args=(engine, Path(work_dir), process, sizes, background, running, stop),
            daemon=True,
        )
        for name, sizes, background in LANES
    ]
    for lane in lanes:
        lane.start()
    # After the lanes start, at the lowest priority: a draft sent while the server starts is claimed at
    # once instead of waiting for the warm-up (which only spares later drafts the first calls' costs).
    threading.Thread(target=_warm_up, name="warm-up", daemon=True).start()
    while any(lane.is_alive() for lane in lanes):
        seen.value = time.time()
        time.sleep(SIGN_OF_LIFE_EVERY)


@dataclass(frozen=True)
class WorkerState:
    """What ``/api/health`` says of the worker of this server process."""

    alive: bool
    pid: int | None
    restarts: int
    last_seen_seconds: float | None
    """Seconds since the worker's last sign of life (None: none yet, it is starting)."""
    running_seconds: float
    """Seconds since the current worker process was started."""


class TaskWorker:
    """The worker process of one server process and its supervisor (``start``, ``state``, ``stop``)."""

    def __init__(self, database_url: str, work_dir: Path, engine: Engine) -> None:
        self.database_url, self.work_dir, self.engine = database_url, work_dir, engine
        self.context = multiprocessing.get_context("spawn")
        self.seen = self.context.Value("d", 0.0, lock=False)
        self.process: multiprocessing.process.BaseProcess | None = None
        self.started = 0.0
        self.restarts = 0
        self._backoff = RESTART_BACKOFF[0]
        self._restart_at: float | None = None
        self._last_recovery = time.monotonic()
        self.stopping = threading.Event()
        self.supervisor = threading.Thread(target=self._supervise, name="task-supervisor", daemon=True)

    def _start_process(self) -> None:
        self.seen.value = 0.0
        self.process = self.context.Process(
            target=worker_main,
            args=(self.database_url, str(self.work_dir), self.seen),
            name="lexigrowth-tasks",
            daemon=False,
        )
        self.process.start()
        self.started = time.monotonic()

    def start(self) -> None:
        self._start_process()
        self.supervisor.start()

    def _recover(self) -> None:
        try:
            recovered = tasks.recover(self.engine)
        except Exception:  # noqa: BLE001 - a busy or restarting database: at the next round
            log.exception("cannot recover abandoned tasks")
            return
        if recovered:
            log.warning("recovered %d tasks of ended processes", len(recovered))

    def _supervise(self) -> None:
        while not self.stopping.wait(SUPERVISE_EVERY):
            try:
                self._look()
            except Exception:  # noqa: BLE001 - the supervisor must outlive any one failure (a full disk...)
                log.exception("supervising the task worker failed; trying again")

    def _look(self) -> None:
        """One look at the worker: note its death (its tasks are recovered at once) and start a new one
        after the back-off; recover abandoned tasks when due."""
        now = time.monotonic()
        process = self.process
        if process is not None and not process.is_alive() and self._restart_at is None:
            lived = now - self.started
            log.error(
                "the task worker (pid %s) ended with code %s after %.0f s; starting a new one in %.0f s",
                process.pid,
                process.exitcode,
                lived,
                self._backoff,
            )
            self._restart_at = now + self._backoff
            self._backoff = (
                min(RESTART_BACKOFF[1], self._backoff * 2) if lived < YOUNG_DEATH else RESTART_BACKOFF[0]
            )
            self._last_recovery = now
            self._recover()  # its tasks: its pid is gone, so they are taken back at once
            scratch.remove_orphans(self.work_dir)
        if self._restart_at is not None and now >= self._restart_at and not self.stopping.is_set():
            self._restart_at = None
            self.restarts += 1
            self._start_process()
        if now - self._last_recovery >= RECOVER_EVERY:
            self._last_recovery = now
            self._recover()

    def state(self) -> WorkerState:
        process = self.process
        seen = self.seen.value
        return WorkerState(
            alive=process is not None and process.is_alive(),
            pid=None if process is None else process.pid,
            restarts=self.restarts,
            last_seen_seconds=None if not seen else round(max(0.0, time.time() - seen), 1),
            running_seconds=round(time.monotonic() - self.started, 1),
        )

    def stop(self) -> None:
        self.stopping.set()
        if self.supervisor.is_alive():
            self.supervisor.join(SUPERVISE_EVERY * 5)
        process = self.process
        if process is None or process.pid is None or not process.is_alive():
            return
        process.terminate()
        process.join(STOP_SECONDS)
        if process.is_alive():
            process.kill()
            process.join(1.0)
