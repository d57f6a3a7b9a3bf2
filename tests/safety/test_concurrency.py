"""Concurrency: ten uploads at once against the real server all land, whole and separate."""

from __future__ import annotations

import threading
import time
from concurrent.futures import ThreadPoolExecutor

import httpx
import pytest

from tests.safety.checks import assert_complete_corpus, assert_matches, assert_sound_store
from tests.safety.generated import write_text
from tests.safety.server import running_server

UPLOADS = 10
JOB_DEADLINE_S = 300


def finished_job(http: httpx.Client, url: str) -> dict:
    """Follow an upload's job until it is done or failed (at most JOB_DEADLINE_S)."""
    deadline = time.monotonic() + JOB_DEADLINE_S
    while (job := http.get(url).json())["status"] not in ("done", "failed"):
        assert time.monotonic() < deadline, job
        time.sleep(0.5)
    return job


@pytest.mark.slow
def test_ten_parallel_uploads_all_land(tmp_path):
    texts = [
        write_text(tmp_path / f"text-{i}.txt", 10_000 + 1_000 * i, common_words=3_000, random_state=100 + i)
        for i in range(UPLOADS)
    ]
    start_together = threading.Barrier(UPLOADS)

    with running_server(tmp_path / "data") as server:

        def upload(index: int) -> httpx.Response:
            with (
                httpx.Client(base_url=server.base_url, timeout=180) as http,
                texts[index].path.open("rb") as f,
            ):
                start_together.wait()
                return http.post(
                    "/api/corpora?wait=1",
                    data={"name": f"parallel {index}", "labels": f"upload={index}"},
                    files={"files": (f"text-{index}.txt", f)},
                )

        with ThreadPoolExecutor(max_workers=UPLOADS) as pool:
            responses = list(pool.map(upload, range(UPLOADS)))

        with httpx.Client(base_url=server.base_url, timeout=60) as http:
            for response in responses:
                # 201 with the corpus, or 202 with the job's address when the wait ran out (the documented answer
                # of ?wait=1 on a busy server): a client then follows the job until it is done.
                assert response.status_code in (201, 202), response.text
                if response.status_code == 202:
                    assert finished_job(http, response.json()["url"])["status"] == "done"
            stored = {c["name"]: c for c in http.get("/api/corpora").json()}
            assert sorted(stored) == sorted(f"parallel {i}" for i in range(UPLOADS))
            assert len({c["id"] for c in stored.values()}) == UPLOADS
            for index, text in enumerate(texts):
                corpus = stored[f"parallel {index}"]
                assert corpus["labels"] == {"upload": str(index)}
                assert_matches(http, corpus, text)
                assert_complete_corpus(http, corpus)
        assert_sound_store(server.store_path)
    assert "database is locked" not in server.log()
    assert "Traceback" not in server.log()
