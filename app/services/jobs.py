"""Background ingestion jobs with progress (bytes done of total), polled by the Upload page."""

from __future__ import annotations

import secrets
import threading
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Any


@dataclass
class Job:
    id: str
    status: str = "queued"  # queued | running | done | failed
    done_bytes: int = 0
    total_bytes: int = 0
    corpus_id: int | None = None
    error: str | None = None
    _lock: threading.Lock = field(default_factory=threading.Lock, repr=False)

    def as_dict(self) -> dict[str, Any]:
        with self._lock:
            share = (
                self.done_bytes / self.total_bytes
                if self.total_bytes
                else (1.0 if self.status == "done" else 0.0)
            )
            return {
                "id": self.id,
                "status": self.status,
                "done_bytes": self.done_bytes,
                "total_bytes": self.total_bytes,
                "progress": round(min(share, 1.0), 4),
                "corpus_id": self.corpus_id,
                "corpus_url": f"/corpora/{self.corpus_id}" if self.corpus_id is not None else None,
                "error": self.error,
            }

    def report(self, done: int, total: int) -> None:
        with self._lock:
            self.done_bytes, self.total_bytes = done, total


class JobRunner:
    """Runs ingestion work on a small thread pool and keeps the latest jobs for polling."""

    def __init__(self, workers: int = 2, keep: int = 500) -> None:
        self._pool = ThreadPoolExecutor(max_workers=workers, thread_name_prefix="ingest")
        self._jobs: dict[str, Job] = {}
        self._keep = keep
        self._lock = threading.Lock()

    def submit(
        self, work: Callable[[Callable[[int, int], None]], int], cleanup: Callable[[], None] | None = None
    ) -> Job:
        """``work(progress)`` returns the new corpus id; any exception marks the job failed with its message."""
        job = Job(id=secrets.token_urlsafe(12))
        with self._lock:
            self._jobs[job.id] = job
            while len(self._jobs) > self._keep:
                self._jobs.pop(next(iter(self._jobs)))

        def run() -> None:
            job.status = "running"
            try:
                job.corpus_id = work(job.report)
                job.status = "done"
            except Exception as exc:  # noqa: BLE001 - the message is shown to the user
                job.error = str(exc) or exc.__class__.__name__
                job.status = "failed"
            finally:
                if cleanup:
                    cleanup()

        self._pool.submit(run)
        return job

    def get(self, job_id: str) -> Job | None:
        return self._jobs.get(job_id)

    def shutdown(self) -> None:
        self._pool.shutdown(wait=False, cancel_futures=True)
