"""Memory and time: a 300 MB text with many types is counted in bounded memory and reasonable time.

The text comes from the deterministic generator of ``benchmarks/ingest_throughput.py``, which also reports
how many tokens and types it wrote: the reference for the counts. Peak resident memory is measured by the
kernel (Linux, proc(5)): for the counting process, its own high-water mark ``VmHWM`` from
/proc/self/status; for its worker processes, after they have ended, ``ru_maxrss`` of RUSAGE_CHILDREN
(``resource.getrusage``, KiB on Linux: the largest of them). Not the counting process's own ``ru_maxrss``:
a process started by fork and exec inherits its parent's peak there, and the test runner may be large.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from app.ingest.engines import available_cpus
from benchmarks.ingest_throughput import write_generated_text

SIZE = 300 * 10**6
PEAK_LIMIT_MIB = 300
TIME_LIMIT_SECONDS = 120  # on a 2-core machine counting takes about 15-25 s

COUNT = """
import json, resource, sys, time
from app.ingest.counting import count_sources
from app.ingest.profiles import TokenizationProfile
from app.ingest.readers import TextSource

start = time.perf_counter()
with count_sources([TextSource.from_path(sys.argv[1])], TokenizationProfile(), workdir=sys.argv[2]) as r:
    tokens, types = r.tokens, r.types
with open("/proc/self/status", encoding="ascii") as status:
    own = next(int(line.split()[1]) for line in status if line.startswith("VmHWM:"))
print(json.dumps({
    "seconds": time.perf_counter() - start,
    "tokens": tokens,
    "types": types,
    "own_kib": own,
    "worker_kib": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss,
}))
"""


@pytest.mark.slow
@pytest.mark.skipif(sys.platform != "linux", reason="reads /proc and ru_maxrss in KiB (Linux)")
def test_300_mb_with_many_types_in_bounded_memory(tmp_path: Path) -> None:
    path = tmp_path / "big.txt"
    generated = write_generated_text(path, SIZE)
    assert generated.types > 500_000  # a realistic dict: as many types as a large reference corpus
    done = subprocess.run(
        [sys.executable, "-c", COUNT, str(path), str(tmp_path)],
        capture_output=True,
        text=True,
        check=True,
        timeout=3 * TIME_LIMIT_SECONDS,
    )
    measured = json.loads(done.stdout)
    assert (measured["tokens"], measured["types"]) == (generated.tokens, generated.types)
    own, worker = measured["own_kib"] / 1024, measured["worker_kib"] / 1024
    summary = f"counting process {own:.0f} MiB, largest worker {worker:.0f} MiB, {measured['seconds']:.1f} s"
    assert own < PEAK_LIMIT_MIB, summary
    assert worker < PEAK_LIMIT_MIB, summary
    if available_cpus() > 1:
        assert worker > 0, "a text this large should go to the local engine's worker processes"
    assert measured["seconds"] < TIME_LIMIT_SECONDS, summary
    assert sorted(p.name for p in tmp_path.iterdir()) == ["big.txt"]  # the type-id file is gone
