"""Streaming counts: invariants, agreement with nltk, exact growth and prefix spectra, chunk independence.

References:
- nltk.FreqDist(tokens).r_Nr() gives the frequency spectrum {r: N_r} of a token list (nltk.probability).
- The spectrum invariants sum_m V_m = V and sum_m m V_m = N (Baayen 2001, Word Frequency Distributions,
  ch. 2).
- "Direct count": len(set(tokens[:n])) on the token list of the whole text, tokenized in one piece.
- hashlib.sha256 of the decoded text for the content hash.
"""

from __future__ import annotations

import hashlib
import math
from collections import Counter
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from nltk import FreqDist

from app.core.spectrum import Spectrum
from app.ingest.counting import (
    PREFIX_FRACTIONS,
    CountResult,
    _safe_cut,
    count_sources,
    growth_checkpoints,
    prefix_length,
)
from app.ingest.profiles import TokenizationProfile, get_profile
from app.ingest.readers import TextSource

DEFAULT = TokenizationProfile()


def nltk_spectrum(tokens: list[str]) -> Spectrum:
    """The reference spectrum: nltk's r -> N_r table (zero rows dropped)."""
    return Spectrum.from_pairs(FreqDist(tokens).r_Nr().items())


def direct_growth(tokens: list[str], checkpoints: list[int]) -> list[tuple[int, int]]:
    """V(n) at each checkpoint by walking the token list once with a set."""
    seen: set[str] = set()
    out = []
    wanted = iter(sorted(checkpoints))
    target = next(wanted, None)
    for position, token in enumerate(tokens, start=1):
        seen.add(token)
        while target == position:
            out.append((position, len(seen)))
            target = next(wanted, None)
    return out


def check_against_direct_count(result: CountResult, tokens: list[str]) -> None:
    """Everything a CountResult claims, recomputed from the whole-text token list."""
    assert result.tokens == len(tokens)
    assert result.counts == dict(Counter(tokens))
    assert list(result.counts) == list(dict.fromkeys(tokens))  # ids in order of first appearance
    spectrum = result.spectrum()
    assert spectrum.pairs() == nltk_spectrum(tokens).pairs()
    assert int(spectrum.vm.sum()) == result.types == len(set(tokens))
    assert int((spectrum.m * spectrum.vm).sum()) == result.tokens
    words = list(result.counts)
    assert [words[i] for i in result.type_ids()] == tokens
    assert result.growth == direct_growth(tokens, [n for n, _ in result.growth])
    for fraction, (size, prefix) in result.prefix_spectra.items():
        assert size == round(Fraction(fraction) * len(tokens))
        assert prefix.pairs() == nltk_spectrum(tokens[:size]).pairs()


WORDS = ["the", "The", "of", "don't", "well-known", "Straße", "STRASSE", "café", "cafe\u0301", "東京", "x"]
SEPARATORS = [" ", "\n", ", ", "; ", " — ", "\t", "  ", "'", "-", " 42 "]


@st.composite
def texts(draw: st.DrawFn) -> str:
    parts = draw(st.lists(st.tuples(st.sampled_from(WORDS), st.sampled_from(SEPARATORS)), max_size=80))
    return "".join(word + sep for word, sep in parts)


MIXED = st.text(
    alphabet=st.sampled_from(list("aZé\u0301ßİıΣς ,.;'’-\u2010<\u0338\n\u00a0\u00ad5٣東にภ\u0e35\u0e48🙂")),
    min_size=1,
    max_size=80,
)


@settings(max_examples=60, deadline=None)
@given(
    text=st.one_of(texts(), MIXED),
    chunk_chars=st.integers(1, 12),
    profile=st.sampled_from(["default", "keep-numbers"]),
)
def test_invariants_and_nltk_spectrum_for_any_text_and_chunking(
    text: str, chunk_chars: int, profile: str
) -> None:
    tokenizer_profile = get_profile(profile)
    tokens = tokenizer_profile.tokenizer().tokens(text)
    source = TextSource.from_text("random", text)
    if not tokens:
        with pytest.raises(ValueError, match=f"random: no word tokens found with profile '{profile}'"):
            count_sources([source], tokenizer_profile, chunk_chars=chunk_chars)
        return
    with count_sources([source], tokenizer_profile, chunk_chars=chunk_chars) as result:
        check_against_direct_count(result, tokens)
        assert result.content_hash == hashlib.sha256(text.encode("utf-8")).hexdigest()


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=texts().filter(lambda t: any(c.isalpha() for c in t)), chunk_chars=st.integers(1, 9))
def test_files_cut_inside_multibyte_characters(tmp_path: Path, text: str, chunk_chars: int) -> None:
    tokens = DEFAULT.tokenizer().tokens(text)
    for codec in ("utf-8", "utf-16"):
        path = tmp_path / f"text-{codec}.txt"
        path.write_bytes(text.encode(codec))
        with count_sources([TextSource.from_path(path)], DEFAULT, chunk_chars=chunk_chars) as result:
            check_against_direct_count(result, tokens)


def test_word_split_across_many_chunks() -> None:
    text = "Antidisestablishmentarianism " * 3 + "東京タワー"
    with count_sources([TextSource.from_text("long", text)], DEFAULT, chunk_chars=3) as result:
        assert result.counts == {
            "antidisestablishmentarianism": 3,
            "東": 1,
            "京": 1,
            "タ": 1,
            "ワ": 1,
            "ー": 1,
        }


def test_chunks_are_never_cut_before_a_combining_mark() -> None:
    # "<" + U+0338 composes to U+226E under NFC (UnicodeData.txt decomposition of U+226E), so a cut
    # between them would change the normalised text; the cut goes after the last such pair instead.
    assert _safe_cut("ab;c<\u0338d") == 3
    assert _safe_cut("1,000") == 0  # a comma may join the digits of a number
    assert _safe_cut("ab<\u0338") == 0
    assert _safe_cut("word;") == 0  # what follows ";" is not known yet
    assert _safe_cut("a;b") == 2
    assert _safe_cut("tail ") == 5


def test_sources_are_separate_texts_of_one_corpus() -> None:
    texts_ = ["first text ends with foo", "bar starts the second", "\ufeffthird"]
    sources = [TextSource.from_text(f"t{i}", t) for i, t in enumerate(texts_)]
    with count_sources(sources, DEFAULT, chunk_chars=5) as result:
        tokens = DEFAULT.tokenizer().tokens(" ".join(texts_))
        check_against_direct_count(result, tokens)
        assert "foobar" not in result.counts
        assert result.names == ["t0", "t1", "t2"]
        # The pasted byte-order mark is not part of the text.
        assert result.content_hash == hashlib.sha256("\n".join([*texts_[:2], "third"]).encode()).hexdigest()


def test_progress_reports_bytes_up_to_the_total(tmp_path: Path) -> None:
    first, second = tmp_path / "a.txt", tmp_path / "b.txt"
    first.write_text("alpha beta gamma " * 200, encoding="utf-8")
    second.write_text("délta épsilon " * 300, encoding="utf-16")
    sources = [TextSource.from_path(first), TextSource.from_path(second)]
    calls: list[tuple[int, int]] = []
    with count_sources(
        sources, DEFAULT, progress=lambda done, total: calls.append((done, total)), chunk_chars=500
    ):
        pass
    total = first.stat().st_size + second.stat().st_size
    assert len(calls) > 10
    assert all(t == total for _, t in calls)
    assert [d for d, _ in calls] == sorted(d for d, _ in calls)
    assert calls[-1][0] == total


def test_text_without_word_tokens_is_an_error(tmp_path: Path) -> None:
    path = tmp_path / "empty.txt"
    path.write_text("1984 — 2024 … ;-) 🙂\n", encoding="utf-8")
    source = TextSource.from_path(path)
    with pytest.raises(ValueError, match=r"^empty\.txt: no word tokens found with profile 'default'$"):
        count_sources([source], DEFAULT, workdir=tmp_path)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["empty.txt"]  # no type-id file left behind
    with count_sources([source], get_profile("keep-numbers")) as result:
        assert result.counts == {"1984": 1, "2024": 1}


def test_type_id_file_lives_in_workdir_until_closed(tmp_path: Path) -> None:
    result = count_sources([TextSource.from_text("t", "a b a c")], DEFAULT, workdir=tmp_path)
    path = result.type_sequence_path
    assert path.parent == tmp_path and path.stat().st_size == 4 * result.tokens
    ids = result.type_ids()
    assert ids.tolist() == [0, 1, 0, 2]
    with pytest.raises(ValueError):
        ids[0] = 5  # read-only
    del ids
    with result:
        pass
    assert not path.exists()
    with pytest.raises(ValueError, match="closed"):
        result.type_ids()
    result.close()  # idempotent


def test_types_at_any_size() -> None:
    with count_sources([TextSource.from_text("t", "a b a c b d")], DEFAULT) as result:
        assert result.types_at(np.arange(7)).tolist() == [0, 1, 2, 2, 3, 3, 4]
        assert result.first_positions.tolist() == [0, 1, 3, 5]


@pytest.mark.parametrize("tokens", [1, 2, 7, 150, 151, 1000, 12_345, 10**6, 10**9])
def test_growth_checkpoints_cover_log_and_linear_scales(tokens: int) -> None:
    points = growth_checkpoints(tokens)
    assert points[0] == 1 and points[-1] == tokens
    assert np.all(np.diff(points) > 0)
    assert len(points) <= 301
    if tokens <= 150:
        assert points.tolist() == list(range(1, tokens + 1))
        return
    assert len(points) >= 150
    # Between neighbours either the linear step (N / 150) or the log step (N^(1/149)) is respected,
    # allowing one unit of rounding on each side.
    linear_step = tokens / 150 + 2
    log_step = tokens ** (1 / 149)
    for a, b in zip(points[:-1], points[1:], strict=True):
        assert b - a <= linear_step or b / a <= log_step * (1 + 2 / a)


@pytest.mark.parametrize("tokens", [1, 3, 4, 5, 15, 25, 10**7 + 5])
def test_prefix_lengths_round_exactly(tokens: int) -> None:
    for fraction in PREFIX_FRACTIONS:
        exact = float(fraction) * tokens
        size = prefix_length(fraction, tokens)
        assert abs(size - exact) <= 0.5
        if abs(size - exact) == 0.5:
            assert size % 2 == 0  # halves go to the even neighbour (Python's round)


def test_stdlib_docstrings_corpus(stdlib_text: str) -> None:
    # Real English: the standard library's docstrings (collected at test time by tests/conftest.py), cut
    # into four files of one corpus at paragraph breaks.
    paragraphs = stdlib_text.split("\n\n")
    quarter = len(paragraphs) // 4
    docs = ["\n\n".join(paragraphs[i : i + quarter]) for i in range(0, 3 * quarter, quarter)]
    docs.append("\n\n".join(paragraphs[3 * quarter :]))
    sources = [TextSource.from_text(f"docs-{i}", text) for i, text in enumerate(docs)]
    tokens = DEFAULT.tokenizer().tokens("\n".join(docs))
    assert len(tokens) > 20_000
    with count_sources(sources, DEFAULT, chunk_chars=4096) as result:
        check_against_direct_count(result, tokens)
        assert result.content_hash == hashlib.sha256("\n".join(docs).encode()).hexdigest()
        spectrum = result.spectrum()
        # Common practice: in English texts of 10^4 - 10^5 tokens somewhere between a quarter and two
        # thirds of the types are hapax legomena, and the most frequent word is "the".
        assert 0.25 < spectrum.hapaxes / result.types < 0.67
        assert max(result.counts, key=result.counts.__getitem__) == "the"
        # Heaps' law V ~ K N^beta: English has beta roughly 0.4-0.8 (common practice), far from 0 and 1.
        growth = dict(result.growth)
        n_small = min(n for n in growth if n >= result.tokens // 100)
        beta = math.log(growth[result.tokens] / growth[n_small]) / math.log(result.tokens / n_small)
        assert 0.35 < beta < 0.85
        # The growth curve is non-decreasing, never above n, and concave overall: the second half of the
        # text brings fewer new types than the first.
        values = [v for _, v in result.growth]
        assert values == sorted(values) and all(v <= n for n, v in result.growth)
        half = result.types_at(result.tokens // 2)
        assert result.types - half < half
