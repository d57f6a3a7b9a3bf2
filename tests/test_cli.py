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
