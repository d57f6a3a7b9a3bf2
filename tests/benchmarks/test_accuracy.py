"""The accuracy benchmark (benchmarks/accuracy.py) on two small texts sampled from Zipf's law, as books and
as collections of passages; its target table on hand-made outcomes."""

from __future__ import annotations

import contextlib
import io
from collections import Counter

import numpy as np
import pytest
from scipy import stats

from app.core.models import MODELS
from app.core.spectrum import Spectrum
from benchmarks.accuracy import (
    BOOKS,
    COLLECTIONS,
    ERROR_COLUMNS,
    INTERPOLATION_SHARES,
    PREDICTORS,
    RECOMMENDED,
    SUMMARY_HEADER,
    TARGETS,
    Case,
    CaseResult,
    Outcome,
    Whole,
    interpolation_check,
    main,
    passage_bounds,
    spectrum_of,
    strip_gutenberg,
    target_checks,
    token_ids,
)

TOKENS = 20_000
ZIPF_EXPONENT = 1.5
WORDS_PER_LINE, LINES_PER_PARAGRAPH = 12, 5
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
    """TOKENS words whose ranks follow Zipf's law p_r ~ r^-ZIPF_EXPONENT (numpy's zipf sampler), 12 a line,
    a blank line after every 5 lines (paragraphs of 60 words)."""
    words = [_word(int(r)) for r in np.random.default_rng(state).zipf(ZIPF_EXPONENT, size=TOKENS)]
    lines = [" ".join(words[i : i + WORDS_PER_LINE]) for i in range(0, len(words), WORDS_PER_LINE)]
    paragraphs = [
        "\n".join(lines[i : i + LINES_PER_PARAGRAPH]) for i in range(0, len(lines), LINES_PER_PARAGRAPH)
    ]
    return "\n\n".join(paragraphs), words


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
    start = next(i for i, line in enumerate(lines) if line.startswith(heading))
    rows = []
    for line in lines[start + 1 :]:
        if line.startswith("#"):
            break
        if line.startswith("| ") and not line.startswith("| ---"):
            rows.append([cell.strip() for cell in line.strip("|").split("|")])
    return rows


@pytest.fixture(scope="module")
def output(corpus) -> str:
    buffer = io.StringIO()
    with contextlib.redirect_stdout(buffer):
        assert main([str(corpus[0]), "--kinds", f"{BOOKS},{COLLECTIONS}", "--states", "1"]) == 0
    return buffer.getvalue()


def test_gutenberg_header_and_footer_are_cut():
    assert strip_gutenberg(HEADER + "body text" + FOOTER).strip() == "body text"
    assert strip_gutenberg("***START OF X ***\nbody\n***END OF X ***").strip() == "body"
    # Without both markers the whole text is kept.
    assert strip_gutenberg("*** START OF X ***\nbody") == "*** START OF X ***\nbody"


def test_texts_are_tokenized_without_the_licence(output, corpus):
    # The generated words are plain lowercase letters, so the default profile yields exactly them; the
    # reference counts are Python's len() and set() of the generated word lists.
    rows = {row[0]: row for row in _table(output, "## Texts")[1:]}
    assert set(rows) == {"first", "second"}
    for name, words in corpus[1].items():
        assert rows[name][1:3] == [f"{len(words):,}", f"{len(set(words)):,}"]


def test_collections_are_cut_into_passages_of_whole_paragraphs(output):
    # 20,000 tokens in paragraphs of 60: five paragraphs reach 300 tokens, so 66 passages of 300 and the
    # last 200 tokens joined to the 66th (hand-computed).
    rows = {row[0]: row for row in _table(output, "## Short-text collections")[1:]}
    assert set(rows) == {"first", "second"}
    assert all(row[1:4] == ["66", "300", "20,000"] for row in rows.values())


def test_passage_bounds_follow_paragraphs_and_refuse_a_mismatch():
    body = "one two three\n\nfour five\n \nsix seven eight nine\n\nten"
    # paragraphs of 3, 2, 4 and 1 tokens; passages of at least 5: [3 + 2], [4 + 1] (hand-computed)
    assert passage_bounds(body, 10, passage_tokens=5).tolist() == [0, 5, 10]
    # the short remainder [1] joins the last passage
    assert passage_bounds(body, 10, passage_tokens=4).tolist() == [0, 5, 10]
    assert passage_bounds(body, 10, passage_tokens=100).tolist() == [0, 10]
    with pytest.raises(ValueError, match="cannot cut passages"):
        passage_bounds(body, 11)


def test_summaries_have_every_kind_fraction_and_predictor(output):
    assert set(PREDICTORS) == {*MODELS, RECOMMENDED}
    for fraction in ("10%", "25%"):
        for kind in (BOOKS, COLLECTIONS):
            summary = _table(output, f"### {kind}, from {fraction}")
            assert tuple(summary[0]) == SUMMARY_HEADER
            assert [row[0].strip("*") for row in summary[1:]] == list(PREDICTORS)
            rows = {row[0].strip("*"): dict(zip(SUMMARY_HEADER, row, strict=True)) for row in summary[1:]}
            for row in rows.values():
                assert row["samples"] == "2"  # two texts, one random sample each
                answered = 2 - int(row["refused"])
                if answered:
                    assert float(row["V median"]) >= 0 and float(row["V worst"]) >= float(row["V median"])
                    assert row["90% coverage"] in {f"{100 * k // answered}%" for k in range(answered + 1)}
            assert rows[RECOMMENDED]["refused"] == "0"

    targets = _table(output, "## Targets")
    assert targets[0] == ["target", "wanted", BOOKS, COLLECTIONS]
    assert [row[0] for row in targets[1:]] == [label for _, label, _ in TARGETS]


def test_per_whole_tables_have_prefixes_for_books_only(output):
    for heading in ("## Extrapolation from 10%", "## Extrapolation from 25%"):
        errors = _table(output, heading)
        assert errors[0] == ["kind", "whole", "predictor", *ERROR_COLUMNS]
        # text by text, the book then its collection
        assert [tuple(row[:3]) for row in errors[1:]] == [
            (kind, text, name)
            for text in ("first", "second")
            for kind in (BOOKS, COLLECTIONS)
            for name in PREDICTORS
        ]
        for row in errors[1:]:
            if row[0] == BOOKS and row[2] == RECOMMENDED:
                assert np.isfinite(float(row[5])) and np.isfinite(float(row[6]))  # the text-order prefix
            if row[0] == COLLECTIONS:
                assert row[5:7] == ["", ""]
            assert row[7] in ("0/1", "1/1")

    checks = _table(output, "## Interpolation check")
    assert [row[0] for row in checks[1:]] == ["first", "second", "median"]
    assert len(checks[0]) == 1 + len(INTERPOLATION_SHARES)
    assert "run time:" in output and "Python" in output and "built from books" in output


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


def _made(types_error: float, covered: bool = True, impossible: int = 0) -> Outcome:
    return Outcome(types_error, types_error, covered, 5.0, False, Counter({"x": impossible}))


def test_targets_compare_the_recommendation_with_the_best_single_model():
    whole = Whole("w", BOOKS, 1000, 100, 50)
    sample = Spectrum.from_frequencies([1, 1, 2])
    results = []
    for draw, (rec, covered) in enumerate([(2.0, True), (-4.0, False), (3.0, True)], start=1):
        outcomes = {name: _made(10.0) for name in MODELS}
        outcomes[next(iter(MODELS))] = _made(1.0)
        outcomes[RECOMMENDED] = _made(rec, covered, impossible=1 if draw == 1 else 0)
        results.append(CaseResult(Case(whole, 0.1, draw, sample), outcomes, {}, Counter()))
    checks = target_checks(results, BOOKS)
    # hand-computed: median |error| of (2, -4, 3) is 3 (natural texts: <= 3 met); the best single model's
    # median is 1, so the recommendation is 2 points worse (missed); 2 of 3 ranges hold the truth (67%,
    # outside 85-95%); one impossible output in all.
    assert checks["V"].cell() == "3.00 met"
    assert checks["V vs best"].met is False and checks["V vs best"].shown.startswith("+2.00")
    assert checks["coverage"].met is False and checks["coverage"].shown.startswith("67% (2/3;")
    assert checks["impossible"].shown == "1 / 1" and checks["impossible"].met is False
    assert checks["half-width"].cell() == "5.00 met"
