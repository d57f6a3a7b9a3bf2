"""The accuracy benchmark (benchmarks/accuracy.py) on two small texts sampled from Zipf's law."""

from __future__ import annotations

import contextlib
import io

import numpy as np
import pytest
from scipy import stats

from app.core.models import MODELS
from benchmarks.accuracy import (
    ERROR_COLUMNS,
    INTERPOLATION_SHARES,
    PREDICTORS,
    SUMMARY_HEADER,
    interpolation_check,
    main,
    spectrum_of,
    strip_gutenberg,
    token_ids,
)

TOKENS = 20_000
ZIPF_EXPONENT = 1.5
HEADER = (
    "The Project Gutenberg eBook of Nothing\nRelease date: never\n"
    "*** START OF THE PROJECT GUTENBERG EBOOK NOTHING ***\n"
)
FOOTER = "\n*** END OF THE PROJECT GUTENBERG EBOOK NOTHING ***\nlicence words that must not count\n"


def _word(rank: int) -> str:
    """Bijective base 26: 1 -> a, 26 -> z, 27 -> aa (distinct ranks give distinct words of letters only)."""
    letters = []
    while rank > 0:
        rank, digit = divmod(rank - 1, 26)
        letters.append(chr(ord("a") + digit))
    return "".join(reversed(letters))


def _zipf_text(state: int) -> tuple[str, list[str]]:
    """TOKENS words whose ranks follow Zipf's law p_r ~ r^-ZIPF_EXPONENT (numpy's zipf sampler), 12 a line."""
    words = [_word(int(r)) for r in np.random.default_rng(state).zipf(ZIPF_EXPONENT, size=TOKENS)]
    lines = [" ".join(words[i : i + 12]) for i in range(0, len(words), 12)]
    return "\n".join(lines), words


@pytest.fixture(scope="module")
def corpus(tmp_path_factory):
    folder = tmp_path_factory.mktemp("texts")
    first, first_words = _zipf_text(1)
    second, second_words = _zipf_text(2)
    (folder / "first.txt").write_text(HEADER + first + FOOTER, encoding="utf-8")
    (folder / "second.txt").write_text(second, encoding="utf-8")
    return folder, {"first": first_words, "second": second_words}


def _table(output: str, heading: str) -> list[list[str]]:
    """Rows (cells, header row first) of the Markdown table under the heading that starts with ``heading``."""
    lines = output.splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith(f"## {heading}"))
    rows = []
    for line in lines[start + 1 :]:
        if line.startswith("## "):
            break
        if line.startswith("| ") and not line.startswith("| ---"):
            rows.append([cell.strip() for cell in line.strip("|").split("|")])
    return rows


@pytest.fixture(scope="module")
def output(corpus) -> str:
    buffer = io.StringIO()
    with contextlib.redirect_stdout(buffer):
        assert main([str(corpus[0]), "--states", "2"]) == 0
    return buffer.getvalue()


def test_gutenberg_header_and_footer_are_cut():
    assert strip_gutenberg(HEADER + "body text" + FOOTER).strip() == "body text"
    assert strip_gutenberg("***START OF X ***\nbody\n***END OF X ***").strip() == "body"
    # Without both markers the whole text is kept.
    assert strip_gutenberg("*** START OF X ***\nbody") == "*** START OF X ***\nbody"


def test_texts_are_tokenized_without_the_licence(output, corpus):
    # The generated words are plain lowercase letters, so the default profile yields exactly them; the
    # reference counts are Python's len() and set() of the generated word lists.
    rows = {row[0]: row for row in _table(output, "Texts")[1:]}
    assert set(rows) == {"first", "second"}
    for name, words in corpus[1].items():
        assert rows[name][1:3] == [f"{len(words):,}", f"{len(set(words)):,}"]


def test_error_tables_have_every_text_model_and_finite_numbers(output):
    for heading in ("Extrapolation from 10%", "Extrapolation from 25%"):
        errors = _table(output, heading)
        assert errors[0] == ["text", "model", *ERROR_COLUMNS]
        assert [(row[0], row[1]) for row in errors[1:]] == [
            (t, m) for t in ("first", "second") for m in PREDICTORS
        ]
        values = np.array([[float(cell) for cell in row[2:6]] for row in errors[1:]])
        assert values.shape == (2 * len(PREDICTORS), 4) and np.all(np.isfinite(values))
        # "k/K": how many of the K = 2 samples' 90% ranges held the observed V
        assert all(row[6] in ("0/2", "1/2", "2/2") for row in errors[1:])
    assert set(PREDICTORS) == {*MODELS, "recommended"}

    for heading in ("Summary from 10%", "Summary from 25%"):
        summary = _table(output, heading)
        assert tuple(summary[0]) == SUMMARY_HEADER
        assert [row[0] for row in summary[1:]] == list(PREDICTORS)
        numbers = np.array([[float(cell) for cell in (*row[1:5], row[6])] for row in summary[1:]])
        assert np.all(np.isfinite(numbers)) and np.all(numbers >= 0)
        coverage = [float(row[5].rstrip("%")) for row in summary[1:]]
        # 4 samples in all: coverage is a multiple of 25%
        assert all(c in (0, 25, 50, 75, 100) for c in coverage)

    checks = _table(output, "Interpolation check")
    assert [row[0] for row in checks[1:]] == ["first", "second", "median"]
    assert len(checks[0]) == 1 + len(INTERPOLATION_SHARES)
    assert "run time:" in output and "Python" in output


def test_interpolation_check_agrees_with_scipy_hypergeometric(corpus):
    # Exact E[V(n)] = sum over types of P(type drawn) = 1 - hypergeom.pmf(0; N, f_i, n) (scipy.stats).
    ids = token_ids(corpus[0] / "first.txt")
    spectrum = spectrum_of(ids)
    frequencies = np.bincount(ids)
    for share in INTERPOLATION_SHARES:
        n = round(share * ids.size)
        check = interpolation_check(ids, spectrum, n, np.random.default_rng(4))
        reference = np.sum(1 - stats.hypergeom.pmf(0, ids.size, frequencies, n))
        assert check.exact == pytest.approx(reference, rel=1e-9)
        # The Monte Carlo mean within 4 standard errors of it (common practice for a simulation check).
        assert abs(check.simulated - reference) < 4 * check.standard_error
