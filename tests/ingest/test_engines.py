"""Engines: serial, local worker processes and Dask give identical results, equal to a direct count.

References:
- The direct count of ``tests/ingest/test_counting.py`` (the whole text tokenized in one piece, nltk
  FreqDist spectra, V(n) by walking the token list with a set, hashlib.sha256 of the decoded text).
- For one batch: ``dict.fromkeys(tokens)`` (types in order of first appearance: the Python documentation,
  Built-in Types, says dictionaries preserve insertion order) and ``list.index`` (first positions).
"""

from __future__ import annotations

import hashlib
import subprocess
import sys
import typing
from pathlib import Path

import dask
import numpy as np
import pytest
from dask.distributed import LocalCluster

from app.ingest import counting
from app.ingest.counting import CountResult, count_sources
from app.ingest.engines import (
    ENGINES,
    LOCAL_MIN_BYTES,
    EngineUnavailableError,
    available_cpus,
    choose_engine,
    count_batch,
)
from app.ingest.profiles import TokenizationProfile, get_profile
from app.ingest.readers import TextSource, UnreadableFileError
from tests.ingest.test_counting import check_against_direct_count

DEFAULT = TokenizationProfile()

# Multi-byte characters in UTF-8 (é, ß, Σ, 東, emoji) and in UTF-16 (emoji: a surrogate pair), a
# combining mark after a base letter, words that tiny chunks cut in the middle, CJK runs (one token per
# character), numbers, apostrophes and hyphens.
MIXED_TEXT = (
    "Straße und STRASSE; café and cafe\u0301 — l’homme, rock'n'roll, well-known 1,000 mp3.\n"
    "ΣΟΦΙΑ σοφια 東京タワーに行った 🙂 Antidisestablishmentarianism!\t"
    "naïve na\u0131ve İstanbul <\u0338 don't-stop ภาษาไทย "
) * 7


def run(sources: list[TextSource], engine: str, chunk_chars: int, **kwargs) -> CountResult:
    return count_sources(sources, DEFAULT, chunk_chars=chunk_chars, engine=engine, **kwargs)


def snapshot(result: CountResult) -> dict:
    """Everything a count result holds, in comparable form (dict order included)."""
    return {
        "counts": list(result.counts.items()),
        "tokens": result.tokens,
        "types": result.types,
        "growth": result.growth,
        "prefix_spectra": {p: (n, s.pairs()) for p, (n, s) in result.prefix_spectra.items()},
        "spectrum": result.spectrum().pairs(),
        "first_positions": result.first_positions.tolist(),
        "type_ids": result.type_ids().tolist(),
        "content_hash": result.content_hash,
        "names": result.names,
    }


@pytest.fixture(scope="module")
def scheduler() -> str:
    """A Dask cluster of two single-threaded workers in this process; its address is used exactly like
    the address of a remote cluster."""
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=":0") as cluster:
        yield cluster.scheduler_address


@pytest.fixture()
def sources(tmp_path: Path) -> list[TextSource]:
    """One corpus of three texts: a UTF-8 file, a UTF-16 file and pasted text."""
    first, second = tmp_path / "one.txt", tmp_path / "two.txt"
    first.write_text(MIXED_TEXT, encoding="utf-8")
    second.write_text(MIXED_TEXT[::-1], encoding="utf-16")
    return [
        TextSource.from_path(first),
        TextSource.from_path(second),
        TextSource.from_text("pasted", MIXED_TEXT[100:700]),
    ]


@pytest.mark.parametrize("chunk_chars", [1, 7, 64, 1000])
def test_engines_agree_with_each_other_and_with_a_direct_count(
    sources: list[TextSource], scheduler: str, chunk_chars: int
) -> None:
    texts = [s.read_text() for s in sources]
    tokens = DEFAULT.tokenizer().tokens("\n".join(texts))
    with run(sources, "serial", chunk_chars) as serial:
        check_against_direct_count(serial, tokens)
        assert serial.content_hash == hashlib.sha256("\n".join(texts).encode()).hexdigest()
        expected = snapshot(serial)
    with run(sources, "local", chunk_chars) as local:
        assert snapshot(local) == expected
    with run(sources, "dask", chunk_chars, scheduler=scheduler) as on_dask:
        assert snapshot(on_dask) == expected


def test_engines_agree_on_real_english(stdlib_text: str, scheduler: str) -> None:
    # Real English (standard-library docstrings, tests/conftest.py), small chunks: many batches whose
    # types overlap, so the merge maps most words to ids assigned by earlier batches.
    sources = [TextSource.from_text("docs", stdlib_text)]
    tokens = DEFAULT.tokenizer().tokens(stdlib_text)
    with run(sources, "serial", 2048) as serial:
        check_against_direct_count(serial, tokens)
        expected = snapshot(serial)
    with run(sources, "local", 2048) as local:
        assert snapshot(local) == expected
    with run(sources, "dask", 2048, scheduler=scheduler) as on_dask:
        assert snapshot(on_dask) == expected


@pytest.mark.parametrize("profile", ["case-sensitive", "numbers-as-one", "split-clitics"])
def test_local_engine_keeps_the_profile(profile: str) -> None:
    chosen = get_profile(profile)
    sources = [TextSource.from_text("mixed", MIXED_TEXT)]
    with count_sources(sources, chosen, chunk_chars=16, engine="local") as local:
        check_against_direct_count(local, chosen.tokenizer().tokens(MIXED_TEXT))


def test_count_batch_numbers_types_in_order_of_first_occurrence() -> None:
    pieces = ["the cat saw the ", "dog; the dog saw ", "", "a cat"]
    tokens = DEFAULT.tokenizer().tokens("".join(pieces))
    batch = count_batch(pieces, DEFAULT)
    words = batch.words()
    assert words == list(dict.fromkeys(tokens))
    assert batch.first.tolist() == [tokens.index(w) for w in words]
    assert [words[i] for i in batch.ids] == tokens
    assert batch.first.dtype == np.int32
    assert batch.ids.dtype == np.uint8  # the smallest type for 7 local ids
    empty = count_batch(["", " ; 42 "], DEFAULT)
    assert empty.words() == [] and empty.ids.size == 0 and empty.first.size == 0


def test_progress_is_reported_per_chunk_in_order_by_the_local_engine(tmp_path: Path) -> None:
    path = tmp_path / "a.txt"
    path.write_text("alpha beta gamma délta\n" * 500, encoding="utf-8")
    calls: list[tuple[int, int]] = []
    with run(
        [TextSource.from_path(path)], "local", 300, progress=lambda d, t: calls.append((d, t))
    ) as result:
        assert result.tokens == 2000
    size = path.stat().st_size
    # One call per chunk of 300 bytes, plus one for the end of the file.
    assert len(calls) == -(-size // 300) + 1
    assert [d for d, _ in calls] == sorted(d for d, _ in calls)
    assert calls[-1] == (size, size)


def test_a_failing_read_stops_the_workers_and_leaves_no_file(tmp_path: Path) -> None:
    path = tmp_path / "gone.txt"
    path.write_text("some words " * 100, encoding="utf-8")
    source = TextSource.from_path(path)
    path.unlink()
    work = tmp_path / "work"
    work.mkdir()
    with pytest.raises(UnreadableFileError, match="gone.txt"):
        run([source], "local", 64, workdir=work)
    assert list(work.iterdir()) == []


def test_no_word_tokens_is_an_error_on_every_engine(tmp_path: Path, scheduler: str) -> None:
    source = TextSource.from_text("numbers", "1984 — 2024 … ;-) 🙂\n" * 20)
    for engine, options in (("local", {}), ("dask", {"scheduler": scheduler})):
        with pytest.raises(ValueError, match="no word tokens found"):
            run([source], engine, 8, workdir=tmp_path, **options)
    assert list(tmp_path.iterdir()) == []


def test_engine_choice() -> None:
    assert choose_engine(None, LOCAL_MIN_BYTES) == "serial"
    assert choose_engine(None, LOCAL_MIN_BYTES + 1) == ("local" if available_cpus() > 1 else "serial")
    assert choose_engine(None, 10, scheduler="tcp://127.0.0.1:8786") == "dask"
    for engine in ENGINES:
        assert choose_engine(engine, 10**12) == engine
    with pytest.raises(ValueError, match="unknown engine 'spark'"):
        choose_engine("spark", 10)
    with pytest.raises(ValueError, match="only used by the dask engine"):
        choose_engine("local", 10, scheduler="tcp://127.0.0.1:8786")


def test_large_inputs_go_to_the_local_engine_by_default(monkeypatch: pytest.MonkeyPatch) -> None:
    used: list[str] = []
    real = counting.count_batches

    def spy(batches, profile, engine, scheduler):
        used.append(engine)
        return real(batches, profile, engine, scheduler)

    monkeypatch.setattr(counting, "count_batches", spy)
    # Pasted text that claims to be large (the size only serves progress and the engine choice).
    large = TextSource(name="t", kind="pasted", size=LOCAL_MIN_BYTES + 1, text="a b c a")
    with count_sources([large], DEFAULT) as result:
        assert result.counts == {"a": 2, "b": 1, "c": 1}
    with count_sources([TextSource.from_text("t", "a b c a")], DEFAULT):
        pass
    assert used == ["local" if available_cpus() > 1 else "serial", "serial"]


def test_unreachable_scheduler_is_reported() -> None:
    with dask.config.set({"distributed.comm.timeouts.connect": "1s"}):
        with pytest.raises(
            EngineUnavailableError, match="cannot reach the Dask scheduler at tcp://127.0.0.1:9"
        ):
            run([TextSource.from_text("t", "a b c")], "dask", 64, scheduler="tcp://127.0.0.1:9")


def test_missing_dask_is_reported(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setitem(sys.modules, "dask.distributed", None)  # makes the import fail
    with pytest.raises(EngineUnavailableError, match="needs dask"):
        run([TextSource.from_text("t", "a b c")], "dask", 64)


def test_cli_offers_exactly_the_engines() -> None:
    from app import cli

    hints = typing.get_type_hints(cli.ingest, include_extras=True)
    choices = typing.get_args(typing.get_args(hints["count_engine"])[0])
    assert set(typing.get_args(choices[0])) == set(ENGINES)


def test_worker_imports_stay_light() -> None:
    # A worker process imports app.ingest.engines to run count_batch: no maths, web, store or Dask.
    code = (
        "import sys, app.ingest.engines; "
        "print(sorted(m for m in ('scipy', 'plotly', 'sqlmodel', 'sqlalchemy', 'fastapi', 'dask', "
        "'charset_normalizer', 'app.core', 'app.ingest.readers') if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


@pytest.mark.slow
def test_dask_engine_starts_its_own_local_cluster(sources: list[TextSource]) -> None:
    with run(sources, "serial", 50) as serial:
        expected = snapshot(serial)
    with run(sources, "dask", 50) as on_dask:
        assert snapshot(on_dask) == expected
