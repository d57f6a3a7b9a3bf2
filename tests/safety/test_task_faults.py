"""The task system keeps working through faults and floods, against real servers (``lexigrowth serve``).

- ``kill -9`` of the task worker: the server starts a new one, ``/api/health`` says what is wrong meanwhile,
  and an upload sent right after the kill reaches a ready corpus page within 15 s.
- Fair shares: with another member's 30 uploads queued, a member's draft has its models within 10 s.
- Uploads waiting with ``?wait=1`` hold no server thread: ``/api/health`` answers at once beside 50 of
  them, and each gives up after the stated time with a 202 and its job.
"""

from __future__ import annotations

import os
import signal
import time
from concurrent.futures import ThreadPoolExecutor

import httpx
import pytest

from app.store import accounts
from app.store.db import make_engine
from tests.safety.apps import STORE_FILE
from tests.safety.generated import write_text
from tests.safety.server import Server, running_server

READY_AFTER_KILL_SECONDS = 15.0  # issue 20's bound
DRAFT_MODELS_SECONDS = 10.0  # issue 20's bound
FLOOD = 30
WAITING = 50
WAIT_SECONDS = 4.0
HEALTH_SECONDS = 2.0  # a free server answers in milliseconds; 50 blocked threads made it 26.5 s before


def draft_text(tmp_path) -> str:
    """200 words, as pasted in the Upload form (Zipf-distributed, so that the models can be fitted)."""
    return write_text(tmp_path / "draft.txt", 200, common_words=150, random_state=11).path.read_text()


def health(server: Server) -> dict:
    return httpx.get(f"{server.base_url}/api/health", timeout=10).json()


def worker_ready(server: Server, timeout: float = 60) -> dict:
    """The health answer once this server's task worker gives signs of life (it has started its lanes)."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        answer = health(server)
        if answer["worker"]["alive"] and answer["worker"]["last_seen_seconds"] is not None:
            return answer
        time.sleep(0.1)
    raise AssertionError(f"the task worker did not start within {timeout} s: {health(server)}")


def models_ready(http: httpx.Client, corpus_id: int, deadline: float) -> bool:
    while time.monotonic() < deadline:
        status = http.get(f"/api/corpora/{corpus_id}").json()["models"]["status"]
        if status in ("ready", "failed"):
            return status == "ready"
        time.sleep(0.05)
    return False


@pytest.mark.slow
def test_after_kill_9_of_the_task_worker_an_upload_still_reaches_a_ready_corpus_page(tmp_path):
    with (
        running_server(tmp_path / "data") as server,
        httpx.Client(base_url=server.base_url, timeout=60) as http,
    ):
        before = worker_ready(server)
        assert before["status"] == "ok" and before["worker"]["restarts"] == 0
        os.kill(before["worker"]["pid"], signal.SIGKILL)
        sent = time.monotonic()
        job = http.post("/api/corpora", data={"name": "after the kill", "text": draft_text(tmp_path)})
        assert job.status_code == 202, job.text

        said, corpus_id = [], None
        deadline = sent + READY_AFTER_KILL_SECONDS
        while time.monotonic() < deadline:
            answer = health(server)
            if answer["status"] != "ok":
                said.extend(answer["problems"])
            corpus_id = http.get(job.json()["url"]).json()["corpus_id"]
            if corpus_id is not None:
                break
            time.sleep(0.05)
        assert corpus_id is not None, (
            f"no corpus {READY_AFTER_KILL_SECONDS} s after the kill: {health(server)}"
        )
        assert models_ready(http, corpus_id, deadline), f"models not ready: {health(server)}"
        page = http.get(f"/corpora/{corpus_id}")
        assert page.status_code == 200 and "Models are being computed" not in page.text
        print(f"upload after kill -9: corpus page with its models {time.monotonic() - sent:.1f} s after")

        assert any("task worker" in problem and "not running" in problem for problem in said), said
        after = health(server)
        assert after["status"] == "ok", after
        assert after["worker"]["restarts"] == 1 and after["worker"]["pid"] != before["worker"]["pid"]
    assert "Traceback" not in server.log()


@pytest.mark.slow
def test_a_draft_has_its_models_within_10_s_while_another_members_30_uploads_are_queued(tmp_path):
    data_dir = tmp_path / "data"
    data_dir.mkdir()
    engine = make_engine(f"sqlite:///{data_dir / STORE_FILE}")
    for name in ("ana", "ben"):
        accounts.add_account(engine, name, f"{name}-password-long-enough")
    tokens = {name: accounts.new_token(engine, name) for name in ("ana", "ben")}
    engine.dispose()
    book = write_text(tmp_path / "book.txt", 140_000, common_words=20_000, min_letters=6, random_state=5)
    assert 0.7e6 < book.size < 1.5e6

    with running_server(data_dir) as server:
        worker_ready(server)
        ana = httpx.Client(
            base_url=server.base_url, timeout=60, headers={"Authorization": f"Bearer {tokens['ana']}"}
        )
        ben = httpx.Client(
            base_url=server.base_url, timeout=60, headers={"Authorization": f"Bearer {tokens['ben']}"}
        )
        with ana, ben:
            content = book.path.read_bytes()
            for index in range(FLOOD):
                sent = ana.post(
                    "/api/corpora", data={"name": f"book {index}"}, files={"files": ("b.txt", content)}
                )
                assert sent.status_code == 202, sent.text
            flood = health(server)["queue"]
            assert flood["queued"] + flood["running"] >= FLOOD - 4, flood  # most of them still waiting

            pasted = draft_text(tmp_path)
            started = time.monotonic()
            draft = ben.post("/api/corpora", data={"name": "draft", "text": pasted})
            assert draft.status_code == 202, draft.text
            deadline = started + DRAFT_MODELS_SECONDS
            corpus_id = None
            while corpus_id is None and time.monotonic() < deadline:
                corpus_id = ben.get(draft.json()["url"]).json()["corpus_id"]
                time.sleep(0.05)
            assert corpus_id is not None, f"the draft was not counted within {DRAFT_MODELS_SECONDS} s"
            assert models_ready(ben, corpus_id, deadline), f"no models within {DRAFT_MODELS_SECONDS} s"
            seconds = time.monotonic() - started
            still = health(server)["queue"]
            print(f"draft models after {seconds:.1f} s with {still['queued']} of ana's uploads still queued")
            assert still["queued"] > 0  # the flood was still there: the draft went past it
    assert "Traceback" not in server.log()


@pytest.mark.slow
def test_uploads_waiting_for_their_corpus_hold_no_thread_and_give_up_after_the_stated_time(tmp_path):
    text = write_text(tmp_path / "text.txt", 60_000, common_words=10_000, random_state=9)
    content = text.path.read_bytes()
    env = {"LEXIGROWTH_UPLOAD_WAIT_SECONDS": str(WAIT_SECONDS)}
    with running_server(tmp_path / "data", extra_env=env) as server:
        worker_ready(server)

        def upload(index: int) -> tuple[httpx.Response, float]:
            started = time.monotonic()
            answer = httpx.post(
                f"{server.base_url}/api/corpora?wait=1",
                data={"name": f"text {index}"},
                files={"files": ("t.txt", content)},
                timeout=120,
            )
            return answer, time.monotonic() - started

        with ThreadPoolExecutor(WAITING) as pool:
            waiting = [pool.submit(upload, i) for i in range(WAITING)]
            time.sleep(1.0)  # the uploads are in and waiting
            answers = []
            for _ in range(5):
                started = time.monotonic()
                answers.append((health(server), time.monotonic() - started))
                time.sleep(0.3)
            results = [future.result() for future in waiting]

    slowest = max(seconds for _, seconds in answers)
    print(f"/api/health beside {WAITING} waiting uploads: slowest of 5 answers {slowest:.3f} s")
    assert slowest < HEALTH_SECONDS, answers
    assert max(answer["queue"]["queued"] for answer, _ in answers) > 0  # they were really waiting
    statuses = [response.status_code for response, _ in results]
    assert set(statuses) <= {201, 202}, statuses
    gave_up = [(response, seconds) for response, seconds in results if response.status_code == 202]
    assert gave_up, "every upload was counted within the wait: the test proves nothing"
    for response, seconds in gave_up:
        assert response.json()["url"] == f"/api/jobs/{response.json()['id']}"
        assert WAIT_SECONDS <= seconds < WAIT_SECONDS + 10, seconds
