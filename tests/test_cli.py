"""Command line: ingest, list, export (typer's CliRunner)."""

from __future__ import annotations

from collections import Counter

from typer.testing import CliRunner

from app.cli import app
from tests.web.test_api import GETTYSBURG, expected_counts

runner = CliRunner()


def test_ingest_list_export(tmp_path):
    text_file = tmp_path / "speech.txt"
    text_file.write_text(GETTYSBURG, encoding="utf-8")
    data = ["--data-dir", str(tmp_path / "data")]
    result = runner.invoke(
        app, ["ingest", str(text_file), "--name", "Speech", "--label", "author=Lincoln", *data]
    )
    assert result.exit_code == 0, result.output
    counts = expected_counts(GETTYSBURG)
    assert f"{sum(counts.values()):,} tokens" in result.output

    listing = runner.invoke(app, ["list", *data])
    assert listing.exit_code == 0 and "Speech" in listing.output

    exported = runner.invoke(app, ["export", "1", *data])
    comments = [line for line in exported.output.splitlines() if line.startswith("#")]
    assert "# corpus: Speech (id 1)" in comments and "# tokenization profile: default" in comments
    assert f"# tokens: {sum(counts.values())}" in comments
    lines = [line for line in exported.output.strip().splitlines() if not line.startswith("#")]
    assert lines[0] == "occurrences\ttypes"
    assert [tuple(map(int, line.split("\t"))) for line in lines[1:]] == sorted(
        Counter(counts.values()).items()
    )


def test_bad_file_and_unknown_corpus(tmp_path):
    bad = tmp_path / "image.txt"
    bad.write_bytes(bytes(range(256)) * 10)
    data = ["--data-dir", str(tmp_path / "data")]
    result = runner.invoke(app, ["ingest", str(bad), "--name", "x", *data])
    assert result.exit_code == 2 and "image.txt" in result.output
    assert runner.invoke(app, ["export", "7", *data]).exit_code == 2


def test_ingest_kinds_and_export_bundle(tmp_path):
    data = ["--data-dir", str(tmp_path / "data")]
    counts = expected_counts(GETTYSBURG)  # the reference counts of tests/web/test_api.py
    table = tmp_path / "counts.csv"
    table.write_text("word,count\n" + "".join(f"{w},{c}\n" for w, c in counts.items()), encoding="utf-8")
    result = runner.invoke(
        app, ["ingest", str(table), "--kind", "word-counts", "--name", "List", "--no-fit", *data]
    )
    assert result.exit_code == 0, result.output
    assert f"{sum(counts.values()):,} tokens" in result.output

    bundle = tmp_path / "list.json.gz"
    exported = runner.invoke(app, ["export", "1", "--bundle", "--output", str(bundle), *data])
    assert exported.exit_code == 0, exported.output
    again = runner.invoke(app, ["ingest", str(bundle), "--kind", "bundle", "--no-fit", *data])
    assert again.exit_code == 0, again.output
    assert "stored corpus 2 'List'" in again.output

    spectrum = tmp_path / "spectrum.tsv"
    spectrum.write_text(runner.invoke(app, ["export", "2", *data]).output, encoding="utf-8")
    third = runner.invoke(
        app, ["ingest", str(spectrum), "--kind", "spectrum", "--name", "S", "--no-fit", *data]
    )
    assert third.exit_code == 0 and f"{len(counts):,} types" in third.output

    spectrum.write_text("1\t-3\n", encoding="utf-8")
    bad = runner.invoke(app, ["ingest", str(spectrum), "--kind", "spectrum", "--name", "S", *data])
    assert bad.exit_code == 2 and "line 1" in bad.output
    listing = runner.invoke(app, ["list", *data]).output
    assert listing.count("\n") == 4  # header and three corpora: the bad file stored nothing


def test_ingest_splits_texts_at_a_marker_line(tmp_path):
    from app.config import Settings
    from app.services import texts
    from app.store.db import make_engine

    paragraphs = GETTYSBURG.split(", ")  # one text per clause
    text_file = tmp_path / "speech.txt"
    text_file.write_text("\n%%\n".join(paragraphs), encoding="utf-8")
    data = ["--data-dir", str(tmp_path / "data")]
    result = runner.invoke(
        app, ["ingest", str(text_file), "--name", "Speech", "--text-separator", "%%", "--no-fit", *data]
    )
    assert result.exit_code == 0, result.output
    engine = make_engine(Settings(data_dir=tmp_path / "data").resolved_database_url)
    table = texts.text_table(engine, 1)
    # Reference: the paragraphs counted by the tests' own counter (expected_counts), one text each.
    assert len(table["texts"]) == len(paragraphs) > 5
    assert [t["tokens"] for t in table["texts"]] == [sum(expected_counts(p).values()) for p in paragraphs]
    engine.dispose()
    refused = runner.invoke(
        app, ["ingest", str(text_file), "--kind", "spectrum", "--name", "x", "--text-separator", "%%", *data]
    )
    assert refused.exit_code == 2 and "text-separator" in refused.output
