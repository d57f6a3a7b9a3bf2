"""Requests abandoned by their clients, and a corpus no model can be fitted to, do not hold up the server.

Against the real server (``lexigrowth serve`` with its task worker): forty page requests that each need
computing, all given up by their clients after 0.2 s, leave the server answering at once; the page of a
corpus without hapax legomena shows the reason its models failed without trying them again; pages whose
clients have gone are not computed to their end (the server's CPU time tells).
"""

from __future__ import annotations

import os
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import httpx
import pytest

from tests.safety.generated import write_text
from tests.safety.server import running_server

ABANDONED = 40
# Bounds for a server that is free to answer; before work was bounded per request, health checks and
# sign-in timed out at 20 s in this situation.
ANSWER_SECONDS = 5.0


def models_status(http: httpx.Client, corpus_id: int, deadline_seconds: float = 180) -> str:
    """The corpus's model status once it is no longer queued or running."""
    deadline = time.monotonic() + deadline_seconds
    while time.monotonic() < deadline:
        status = http.get(f"/api/corpora/{corpus_id}").json()["models"]["status"]
        if status not in ("queued", "running"):
            return status
        time.sleep(0.2)
    raise AssertionError(f"the models of corpus {corpus_id} were not ready within {deadline_seconds} s")


def timed_get(url: str) -> tuple[httpx.Response, float]:
    started = time.monotonic()
    response = httpx.get(url, timeout=30)
    return response, time.monotonic() - started


@pytest.mark.slow
def test_abandoned_page_requests_and_an_unfittable_corpus_leave_the_server_answering(tmp_path):
    text = write_text(tmp_path / "draft.txt", 20_000, common_words=3_000, random_state=7)
    with (
        running_server(tmp_path / "data") as server,
        httpx.Client(base_url=server.base_url, timeout=120) as http,
    ):
        with text.path.open("rb") as f:
            fitted = http.post("/api/corpora?wait=1", data={"name": "draft"}, files={"files": ("d.txt", f)})
        assert fitted.status_code == 201, fitted.text
        # one sentence pasted 300 times: every word occurs 300 times, none once
        repeated = ("the field notes were copied again. " * 300).encode()
        stuck = http.post(
            "/api/corpora?wait=1", data={"name": "pasted"}, files={"files": ("p.txt", repeated)}
        )
        assert stuck.status_code == 201, stuck.text
        fitted_id, stuck_id = fitted.json()["id"], stuck.json()["id"]
        assert models_status(http, fitted_id) == "ready"
        assert models_status(http, stuck_id) == "failed"

        def abandon(index: int) -> bool:
            # each with its own settings, so that no page kept from an earlier request can answer it
            corpus = fitted_id if index % 2 else stuck_id
            url = f"{server.base_url}/corpora/{corpus}?horizon={2 + index}&sizes={1000 + index}"
            try:
                httpx.get(url, timeout=0.2)
            except httpx.TimeoutException:
                return True
            return False

        with ThreadPoolExecutor(ABANDONED) as pool:
            given_up = sum(pool.map(abandon, range(ABANDONED)))
        assert given_up > 0  # at least some requests were really abandoned mid-way

        health, seconds = timed_get(f"{server.base_url}/api/health")
        assert health.status_code == 200 and seconds < ANSWER_SECONDS, seconds
        page, seconds = timed_get(f"{server.base_url}/corpora/{stuck_id}")
        assert page.status_code == 200 and seconds < ANSWER_SECONDS, seconds
        assert "No vocabulary model could be fitted to this corpus" in page.text
        assert "hapax" in page.text  # the reason is said
        form, seconds = timed_get(f"{server.base_url}/upload")
        assert form.status_code == 200 and seconds < ANSWER_SECONDS, seconds
    assert "Traceback" not in server.log()


ABANDONED_PAGES = 8
CLOCK_TICKS = os.sysconf("SC_CLK_TCK") if hasattr(os, "sysconf") else 100


def cpu_seconds(pid: int) -> float:
    """User and system CPU time of process ``pid``: fields 14 and 15 of /proc/PID/stat, in clock ticks
    (proc(5))."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / CLOCK_TICKS


def heavy_page(base_url: str, corpus_ids: list[int], variant: int) -> str:
    """The comparison of two large corpora (the heaviest page a member opens: size-matched tests, growth
    curves, distinctive words) at its own common size, so that no kept page answers it."""
    corpora = "&".join(f"corpus={cid}" for cid in corpus_ids)
    return f"{base_url}/compare?{corpora}&common_size={100_000 + variant}"


@pytest.mark.slow
@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="reads /proc (Linux)")
def test_pages_whose_clients_have_gone_are_not_computed_to_their_end(tmp_path):
    texts = [
        write_text(
            tmp_path / f"text{i}.txt", 300_000, new_word_every=3 + i, min_letters=4, random_state=3 + i
        )
        for i in range(2)
    ]
    with (
        running_server(tmp_path / "data") as server,
        httpx.Client(base_url=server.base_url, timeout=120) as http,
    ):
        corpus_ids = []
        for i, text in enumerate(texts):
            with text.path.open("rb") as f:
                stored = http.post(
                    "/api/corpora?wait=1", data={"name": f"medium {i}"}, files={"files": ("m.txt", f)}
                )
            assert stored.status_code == 201, stored.text
            corpus_ids.append(stored.json()["id"])
        for corpus_id in corpus_ids:
            assert models_status(http, corpus_id) == "ready"
        assert (
            http.get(heavy_page(server.base_url, corpus_ids, 0)).status_code == 200
        )  # shared parts computed
        pid = server.process.pid

        before = cpu_seconds(pid)
        assert httpx.get(heavy_page(server.base_url, corpus_ids, 1), timeout=120).status_code == 200
        one_page = cpu_seconds(pid) - before

        def abandon(variant: int) -> bool:
            try:
                httpx.get(heavy_page(server.base_url, corpus_ids, variant), timeout=0.1)
            except httpx.TimeoutException:
                return True
            return False

        before = cpu_seconds(pid)
        with ThreadPoolExecutor(ABANDONED_PAGES) as pool:
            given_up = sum(pool.map(abandon, range(2, ABANDONED_PAGES + 2)))
        time.sleep(5 + 2 * one_page)  # long enough for the pages to be computed, had they been
        spent = cpu_seconds(pid) - before
    print(f"one page {one_page:.2f} s of CPU; {given_up} abandoned pages then cost {spent:.2f} s")
    assert given_up == ABANDONED_PAGES
    # Computed to their end they would cost about ABANDONED_PAGES * one_page (8 x 0.4-0.6 s here); a page
    # whose client left during a section (the distinctive words, most of its cost) ends that section
    # first, so they cost 9-21% of that here, depending on how far each got in the client's 0.1 s.
    assert spent < 0.5 * ABANDONED_PAGES * one_page, (spent, one_page)
