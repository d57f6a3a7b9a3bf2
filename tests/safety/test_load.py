"""The load benchmark (benchmarks/load.py): its statistics, and a short run against the real server."""

from __future__ import annotations

import json
import re
import subprocess
import sys
import time

import httpx
import numpy as np
import pytest

from app.config import DEMO_DIR
from benchmarks.load import (
    PAGES,
    PERCENTILES,
    Sample,
    comparison_sets,
    main,
    percentile,
    run_user,
    summarize,
    user_urls,
)
from tests.safety.server import REPO_ROOT, free_port, running_server


@pytest.mark.parametrize("n", [1, 2, 3, 10, 101])
def test_percentile_is_numpy_linear_interpolation(n):
    values = np.random.default_rng(n).lognormal(mean=4, sigma=1, size=n)
    for q in (0, 12.5, 50, 95, 99, 100):
        # Reference: numpy.percentile, whose default method "linear" is Hyndman and Fan's definition 7.
        assert percentile(values.tolist(), q) == pytest.approx(np.percentile(values, q), rel=1e-12)


def test_summary_counts_requests_and_errors_per_page():
    samples = [Sample("library", 0.010), Sample("library", 0.030, "HTTP 500 /"), Sample("corpus", 0.2)]
    rows = {row.page: row for row in summarize(samples)}
    assert [row.page for row in summarize(samples)] == [*PAGES, "all"]
    assert (rows["library"].requests, rows["library"].errors) == (2, 1)
    assert (rows["all"].requests, rows["all"].errors) == (3, 1)
    assert rows["comparison"].requests == 0
    # numpy.percentile as the reference for the percentiles, then the largest latency
    assert rows["library"].percentiles_ms == pytest.approx(
        [*(np.percentile([10, 30], q) for q in PERCENTILES), 30.0]
    )


def test_every_user_visits_every_corpus_and_compares_two_or_three():
    ids = [4, 8, 15, 16, 23, 42]
    groups = comparison_sets(ids)
    assert {len(g) for g in groups} == {2, 3} and all(len(set(g)) == len(g) for g in groups)
    for user in range(3):
        loop = user_urls(ids, user)
        assert [page for page, _ in loop] == ["library", "corpus", "comparison"] * len(ids)
        assert user_urls(ids, user, uploads=True)[-1] == ("upload", "/api/corpora")
        assert sorted(url for page, url in loop if page == "corpus") == sorted(f"/corpora/{i}" for i in ids)


def test_unreachable_server_is_exit_code_2(capsys):
    assert main(["--url", f"http://127.0.0.1:{free_port()}", "--duration", "1", "--timeout", "2"]) == 2
    assert "cannot list the corpora" in capsys.readouterr().err


@pytest.fixture(scope="module")
def demo_server(tmp_path_factory):
    """The real server with the demo corpora, all listed, and their pages rendered once (warm)."""
    expected = len(json.loads((DEMO_DIR / "manifest.json").read_text(encoding="utf-8"))["corpora"])
    with running_server(tmp_path_factory.mktemp("load") / "data", load_demo=True) as server:
        with httpx.Client(base_url=server.base_url, timeout=120) as http:
            deadline = time.monotonic() + 300  # the demo corpora are counted in the background
            while len(ids := [c["id"] for c in http.get("/api/corpora").json()]) < expected:
                assert time.monotonic() < deadline, f"{len(ids)} of {expected} demo corpora after 300 s"
                time.sleep(0.5)
            for user in range(len(ids)):
                for _, url in user_urls(ids, user)[:3]:
                    assert http.get(url).status_code == 200, url
        yield server


@pytest.mark.slow
def test_errors_are_counted_not_hidden(demo_server):
    samples = run_user(demo_server.base_url, [("corpus", "/corpora/999999")], deadline=0, timeout=10)
    assert samples == []  # the deadline has passed: no request starts
    samples = run_user(
        demo_server.base_url, [("corpus", "/corpora/999999")], deadline=time.monotonic() + 0.5, timeout=10
    )
    assert samples and all(s.error == "HTTP 404 /corpora/999999" for s in samples)


@pytest.mark.slow
def test_ten_users_for_fifteen_seconds_without_errors(demo_server):
    run = subprocess.run(
        [
            sys.executable,
            "benchmarks/load.py",
            "--url",
            demo_server.base_url,
            "--users",
            "10",
            "--duration",
            "15",
            "--uploads",
        ],
        cwd=REPO_ROOT,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert run.returncode == 0, run.stdout + run.stderr
    table = {
        m["page"]: (int(m["requests"].replace(",", "")), int(m["errors"].replace(",", "")))
        for m in re.finditer(
            r"^\| (?P<page>\w+) \| (?P<requests>[\d,]+) \| (?P<errors>[\d,]+) \|", run.stdout, re.M
        )
    }
    assert set(table) == {*PAGES, "all"}, run.stdout
    assert all(requests > 0 and errors == 0 for requests, errors in table.values()), run.stdout
    assert table["all"][0] == sum(table[page][0] for page in PAGES)
