"""Text-order statistics from previous occurrences, against plain reference versions written here (a dict of
last positions, np.unique per segment, the sequential MTLD pass), lexicalrichness on the same token lists
and the published definitions (Covington & McFall 2010 for MATTR, McCarthy & Jarvis 2010 for MTLD).

Conventions of lexicalrichness 0.5 (its source read for this), shared by ours: MATTR is the mean TTR of all
N - W + 1 windows; MTLD ends a factor when the running TTR falls to the threshold or below, counts the
leftover as (1 - TTR) / (1 - threshold), averages forward and backward measures, and counts a pass without
any factor as one factor.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lexicalrichness import LexicalRichness

from app.core import richness
from app.core.occurrences import previous_occurrences, reversed_previous
from app.core.richness import mattr, mtld, mtld_factors
from app.core.text_order import segment_sizes, segment_spread, text_order_spread, text_order_statistics
from tests.core.test_interpolation import stdlib_docstring_tokens, token_ids


def reference_previous(ids: list[int]) -> list[int]:
    last: dict[int, int] = {}
    out = []
    for i, t in enumerate(ids):
        out.append(last.get(t, -1))
        last[t] = i
    return out


def reference_factors(ids: list[int], threshold: float) -> float:
    """One MTLD pass as McCarthy & Jarvis (2010) describe it, token by token."""
    seen: set[int] = set()
    factors = length = 0
    for t in ids:
        length += 1
        seen.add(t)
        if len(seen) / length <= threshold:
            factors += 1
            seen, length = set(), 0
    return factors + ((1 - len(seen) / length) / (1 - threshold) if length else 0)


def reference_mtld(ids: list[int], threshold: float) -> float:
    passes = [reference_factors(seq, threshold) or 1.0 for seq in (ids, ids[::-1])]
    return (len(ids) / passes[0] + len(ids) / passes[1]) / 2


def reference_mattr(ids: list[int], window: int) -> float:
    """Covington & McFall (2010): the mean over all windows of their TTR."""
    ttrs = [len(set(ids[s : s + window])) / window for s in range(len(ids) - window + 1)]
    return sum(ttrs) / len(ttrs)


# Sequences from a few types (many short factors) to many (long factors, or none at all).
sequences = st.integers(2, 400).flatmap(
    lambda types: st.lists(st.integers(0, types - 1), min_size=1, max_size=3000)
)


@given(sequences, st.sampled_from([1 << 4, 1 << 15]))
@settings(max_examples=150, deadline=None)
def test_previous_occurrences_match_a_dict_of_last_positions(ids: list[int], chunk: int) -> None:
    prev = previous_occurrences(np.array(ids, dtype=np.int32), chunk=chunk)
    assert prev.tolist() == reference_previous(ids)
    assert reversed_previous(prev).tolist() == reference_previous(ids[::-1])


def test_previous_occurrences_of_more_than_65536_types() -> None:
    # type ids beyond 16 bits take the general sort
    ids = np.random.default_rng(3).integers(0, 200_000, 50_000)
    assert previous_occurrences(ids, chunk=4096).tolist() == reference_previous(ids.tolist())


@given(sequences, st.sampled_from([0.5, 0.72, 0.9]))
@settings(max_examples=200, deadline=None)
def test_mtld_equals_the_sequential_pass(ids: list[int], threshold: float) -> None:
    # texts of up to 3000 tokens are cut into many 512-token blocks, so the chains and their joins are used
    arr = np.array(ids)
    prev = previous_occurrences(arr)
    assert mtld_factors(prev, threshold) == pytest.approx(reference_factors(ids, threshold), rel=1e-12)
    assert mtld(arr, threshold) == pytest.approx(reference_mtld(ids, threshold), rel=1e-12)


@given(sequences, st.integers(1, 60))
@settings(max_examples=150, deadline=None)
def test_mattr_equals_the_mean_window_ttr(ids: list[int], window: int) -> None:
    if len(ids) < window:
        assert mattr(np.array(ids), window) is None
    else:
        assert mattr(np.array(ids), window) == pytest.approx(reference_mattr(ids, window), rel=1e-12)


@given(st.lists(st.sampled_from("abcdefghijklmnopqrstuvwxyz"[:12]), min_size=60, max_size=800))
@settings(max_examples=60, deadline=None)
def test_mattr_and_mtld_match_lexicalrichness_on_random_token_lists(tokens: list[str]) -> None:
    reference = LexicalRichness(tokens, preprocessor=None, tokenizer=None)
    ids = token_ids(tuple(tokens))
    assert mattr(ids, 50) == pytest.approx(reference.mattr(window_size=50), rel=1e-12)
    assert mtld(ids, 0.72) == pytest.approx(reference.mtld(threshold=0.72), rel=1e-12)


def test_mtld_chains_join_on_long_real_text(monkeypatch: pytest.MonkeyPatch) -> None:
    # the docstring corpus repeated to ~1.5 million tokens (blocks of ~3000 tokens), and with tiny blocks and
    # windows (so joins and window doubling happen everywhere), against the sequential pass
    ids = token_ids(stdlib_docstring_tokens())
    text = np.tile(ids, -(-1_500_000 // ids.size))
    prev = previous_occurrences(text)
    assert mtld_factors(prev) == pytest.approx(reference_factors(text.tolist(), 0.72), rel=1e-12)
    monkeypatch.setattr(richness, "MTLD_CHAINS", 5000)
    monkeypatch.setattr(richness, "MTLD_WIDTH", 8)
    short = previous_occurrences(ids)
    assert mtld_factors(short) == pytest.approx(reference_factors(ids.tolist(), 0.72), rel=1e-12)


def test_mtld_of_a_text_without_factors() -> None:
    # every token new: no factor ends, the leftover counts (1 - 1) / (1 - 0.72) = 0, so one factor per pass
    ids = np.arange(5000)
    assert mtld_factors(previous_occurrences(ids)) == 0.0
    assert mtld(ids) == pytest.approx(reference_mtld(ids.tolist(), 0.72)) == 5000


def reference_spread(ids: np.ndarray, size: int, max_segments: int = 200) -> tuple[float, float, int]:
    count = ids.size // size
    starts = np.unique(np.linspace(0, count - 1, min(count, max_segments)).astype(np.int64)) * size
    types = np.array([np.unique(ids[s : s + size]).size for s in starts], dtype=float)
    return float(types.mean()), float(types.std(ddof=1)) if types.size > 1 else 0.0, int(types.size)


@given(sequences, st.integers(1, 500))
@settings(max_examples=150, deadline=None)
def test_segment_spread_equals_unique_per_segment(ids: list[int], size: int) -> None:
    arr = np.array(ids)
    if size > arr.size:
        return
    spread = segment_spread(arr, size, max_segments=7)
    assert (spread.mean, spread.sd, spread.segments) == reference_spread(arr, size, 7)


def test_text_order_statistics_on_real_text() -> None:
    ids = token_ids(stdlib_docstring_tokens())
    tokens = list(stdlib_docstring_tokens())
    stats = text_order_statistics(ids)
    reference = LexicalRichness(tokens, preprocessor=None, tokenizer=None)
    assert stats.measured_tokens == ids.size
    assert stats.mattr == pytest.approx(reference.mattr(window_size=50), rel=1e-12)
    assert stats.mtld == pytest.approx(reference.mtld(threshold=0.72), rel=1e-12)
    sizes = segment_sizes(ids.size)
    assert [s.size for s in stats.segments] == sizes.tolist()
    for spread in text_order_spread(ids):
        assert (spread.mean, spread.sd, spread.segments) == reference_spread(ids, spread.size)


def test_text_order_statistics_of_an_empty_text() -> None:
    stats = text_order_statistics(np.zeros(0, dtype=np.int32))
    assert (stats.measured_tokens, stats.mattr, stats.mtld, stats.segments) == (0, None, None, [])
