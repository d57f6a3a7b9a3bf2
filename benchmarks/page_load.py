"""Page load in the browser: a demo corpus's page in headless Chromium, cold and warm cache, this checkout
against a baseline revision, in one run.

Starts this checkout's app under uvicorn on a new store with the demo corpora and waits until their models are
fitted; with ``--baseline REF`` it also starts the app of git revision REF (``git archive`` into a temporary
folder) on the same store (any number of servers may serve one store). For each server, a corpus page is
opened ``--repeats`` times in a fresh browser context (cold: empty HTTP cache) and then again in the same
context (warm: plotly.js and our scripts from the cache, the page revalidated by its ETag). Times are the
page's own clock (``performance.now()``, from the start of navigation):

- ``first view``: the load event and every plot that lies within the window drawn (has its SVG);
- ``all plots``: then the page is scrolled down one window height per animation frame to the bottom, and the
  time is taken when every plot of the page is drawn.

Prints a Markdown table of the medians and the ratio of the baseline's medians to this checkout's.

    python benchmarks/page_load.py [--baseline REF] [--repeats 7] [--corpus NAME]
"""

from __future__ import annotations

import argparse
import os
import shutil
import socket
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import httpx
from playwright.sync_api import sync_playwright

REPO = Path(__file__).resolve().parents[1]
CHROMIUM = "/usr/bin/chromium"
VIEWPORT = {"width": 1440, "height": 900}

FIRST_VIEW = """async () => {
  const drawn = el => !!el.querySelector(".main-svg");
  const visible = el => { const r = el.getBoundingClientRect(); return r.height > 0 && r.top < innerHeight; };
  if (document.readyState !== "complete") { await new Promise(r => addEventListener("load", r)); }
  while (![...document.querySelectorAll(".plot-area[data-figure]")].filter(visible).every(drawn)) {
    await new Promise(r => requestAnimationFrame(r));
  }
  return performance.now();
}"""

ALL_PLOTS = """async () => {
  const plots = [...document.querySelectorAll(".plot-area[data-figure]")].filter(el => el.getClientRects().length > 0);
  while (scrollY + innerHeight < document.documentElement.scrollHeight - 1) {
    scrollBy(0, innerHeight);
    await new Promise(r => requestAnimationFrame(r));
  }
  while (!plots.every(el => el.querySelector(".main-svg"))) { await new Promise(r => requestAnimationFrame(r)); }
  return [performance.now(), plots.length];
}"""


class Server:
    """The app of ``source`` under uvicorn on a free loopback port, serving the store in ``data_dir``."""

    def __init__(self, source: Path, data_dir: Path, load_demo: bool) -> None:
        with socket.socket() as probe:
            probe.bind(("127.0.0.1", 0))
            port = probe.getsockname()[1]
        env = {k: v for k, v in os.environ.items() if not k.startswith("LEXIGROWTH_")}
        env |= {"LEXIGROWTH_DATA_DIR": str(data_dir), "LEXIGROWTH_LOAD_DEMO": str(load_demo).lower()}
        command = [sys.executable, "-m", "uvicorn", "app.main:create_app", "--factory", "--port", str(port)]
        self.process = subprocess.Popen(
            [*command, "--log-level", "warning"], cwd=source, env=env, stdout=subprocess.DEVNULL
        )
        self.url = f"http://127.0.0.1:{port}"

    def corpora_ready(self, timeout_s: float = 600) -> list[dict]:
        """The stored corpora, once every one has its models fitted (or failed) and no job is pending."""
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            try:
                listed = httpx.get(f"{self.url}/api/corpora", timeout=30).json()
                statuses = [
                    httpx.get(f"{self.url}/api/corpora/{c['id']}", timeout=30).json()["models"]["status"]
                    for c in listed
                ]
                if listed and all(s in ("ready", "failed") for s in statuses):
                    return listed
            except (httpx.HTTPError, ValueError, KeyError):
                pass
            time.sleep(0.5)
        raise SystemExit("the server did not get ready in time")

    def stop(self) -> None:
        self.process.terminate()
        self.process.wait(30)


def baseline_source(ref: str, folder: Path) -> Path:
    """The files of git revision ``ref`` in ``folder``."""
    archive = subprocess.run(["git", "archive", ref], cwd=REPO, check=True, capture_output=True).stdout
    subprocess.run(["tar", "-x", "-C", str(folder)], input=archive, check=True)
    return folder


def measure(browser, url: str, repeats: int) -> dict[str, list[float]]:
    """Per cache state, the times (ms) of the first view and of all plots drawn, and the number of plots."""
    times: dict[str, list[float]] = {"cold first": [], "cold all": [], "warm first": [], "warm all": []}
    plots = 0
    for _ in range(repeats):
        context = browser.new_context(viewport=VIEWPORT)
        page = context.new_page()
        for state in ("cold", "warm"):
            page.goto(url, wait_until="commit")
            times[f"{state} first"].append(page.evaluate(FIRST_VIEW))
            done, plots = page.evaluate(ALL_PLOTS)
            times[f"{state} all"].append(done)
        context.close()
    times["plots"] = [plots]
    return times


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--baseline", help="git revision to compare with (e.g. the commit before a change)")
    parser.add_argument("--repeats", type=int, default=7)
    parser.add_argument("--corpus", default=None, help="name of the demo corpus (default: the largest)")
    args = parser.parse_args(argv)

    work = Path(tempfile.mkdtemp(prefix="lexigrowth-page-load-"))
    servers = {"this checkout": Server(REPO, work / "data", load_demo=True)}
    try:
        corpora = servers["this checkout"].corpora_ready()
        chosen = (
            next(c for c in corpora if c["name"] == args.corpus)
            if args.corpus
            else max(corpora, key=lambda c: c["tokens"])
        )
        if args.baseline:
            source = baseline_source(args.baseline, Path(tempfile.mkdtemp(dir=work)))
            servers[f"baseline {args.baseline}"] = Server(source, work / "data", load_demo=False)
            servers[f"baseline {args.baseline}"].corpora_ready()
        results = {}
        with sync_playwright() as playwright:
            browser = playwright.chromium.launch(executable_path=CHROMIUM, args=["--no-sandbox"])
            for name, server in servers.items():
                httpx.get(f"{server.url}/corpora/{chosen['id']}", timeout=60).raise_for_status()  # kept page
                results[name] = measure(browser, f"{server.url}/corpora/{chosen['id']}", args.repeats)
            browser.close()
    finally:
        for server in servers.values():
            server.stop()
        shutil.rmtree(work, ignore_errors=True)

    load = os.getloadavg()[0]
    print(f"Corpus page of {chosen['name']!r} ({chosen['tokens']:,} tokens), Chromium headless at 1440x900,")
    print(f"median of {args.repeats} runs (ms from navigation start); load average {load:.1f}\n")
    keys = ("cold first", "cold all", "warm first", "warm all")
    print("| server | plots | " + " | ".join(keys) + " |")
    print("|---|---:|" + "---:|" * len(keys))
    medians = {name: [statistics.median(r[k]) for k in keys] for name, r in results.items()}
    for name, r in results.items():
        cells = " | ".join(f"{m:,.0f}" for m in medians[name])
        print(f"| {name} | {r['plots'][0]:.0f} | {cells} |")
    if args.baseline:
        ours, theirs = medians["this checkout"], medians[f"baseline {args.baseline}"]
        print(
            "| baseline / this checkout | | "
            + " | ".join(f"{b / a:.2f}x" for a, b in zip(ours, theirs, strict=True))
            + " |"
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
