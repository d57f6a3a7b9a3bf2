"""Text-order statistics: how much vocabulary consecutive stretches of the text actually hold.

Random-order interpolation (app.core.interpolation) assumes tokens are shuffled; real texts cluster words
by topic, so the type count of a contiguous segment of n tokens is usually lower and more variable than
E[V(n)] of a random sample (Baayen 2001, ch. 5, on the non-randomness of word use). These statistics
are measured on the sequence of type ids in text order.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from app.core import richness
from app.core.occurrences import previous_occurrences

MAX_SEGMENTS = 200


@dataclass(frozen=True)
class SegmentSpread:
    """Types in non-overlapping text segments of ``size`` tokens: mean, standard deviation, count."""

    size: int
    mean: float
    sd: float
    segments: int


def segment_sizes(tokens: int, smallest: int = 50, points: int = 24) -> np.ndarray:
    """Log-spaced segment sizes from ``smallest`` up to half the text (so each size has >= 2 segments)."""
    largest = tokens // 2
    if largest < smallest:
        return np.array([], dtype=np.int64)
    return np.unique(np.geomspace(smallest, largest, points).astype(np.int64))


def segment_spread(
    type_ids: np.ndarray, size: int, max_segments: int = MAX_SEGMENTS, prev: np.ndarray | None = None
) -> SegmentSpread:
    """V of each non-overlapping segment of ``size`` tokens (evenly chosen when there are more than
    ``max_segments`` of them); its mean and sample standard deviation.

    The segment [s, s + size) holds as many types as it has positions i with prev[i] < s (each type counted
    at its first position in the segment), ``prev`` being ``previous_occurrences`` of the text (computed
    here when not given): one comparison per token instead of a sort per segment.
    """
    count = type_ids.size // size
    if count < 1:
        raise ValueError(f"a segment of {size} tokens is longer than the text ({type_ids.size} tokens)")
    if prev is None:
        prev = previous_occurrences(type_ids)
    starts = np.unique(np.linspace(0, count - 1, min(count, max_segments)).astype(np.int64)) * size
    types = np.array([np.count_nonzero(prev[s : s + size] < s) for s in starts], dtype=float)
    sd = float(types.std(ddof=1)) if types.size > 1 else 0.0
    return SegmentSpread(int(size), float(types.mean()), sd, int(types.size))


def text_order_spread(type_ids: np.ndarray, prev: np.ndarray | None = None) -> list[SegmentSpread]:
    """Segment spreads at log-spaced sizes for the whole text."""
    if prev is None:
        prev = previous_occurrences(type_ids)
    return [segment_spread(type_ids, int(s), prev=prev) for s in segment_sizes(type_ids.size)]


@dataclass(frozen=True)
class TextOrderStatistics:
    """MATTR, MTLD and segment spreads of one text, measured on ``measured_tokens`` tokens in text order."""

    measured_tokens: int
    mattr: float | None
    mtld: float | None
    segments: list[SegmentSpread]


def text_order_statistics(type_ids: np.ndarray) -> TextOrderStatistics:
    """Every text-order statistic from one computation of the previous occurrences (O(N), memory: two
    position arrays of N entries, int32 below 2^31 tokens, besides ``type_ids``, which may be a memmap)."""
    prev = previous_occurrences(type_ids)
    return TextOrderStatistics(
        int(type_ids.size),
        richness.mattr(type_ids, prev=prev),
        richness.mtld(type_ids, prev=prev),
        text_order_spread(type_ids, prev),
    )


def interpolate_spread(spreads: list[SegmentSpread], size: float) -> tuple[float, float] | None:
    """Mean and sd of segment types at ``size`` by log-log interpolation between measured sizes,
    or None outside the measured range."""
    if not spreads:
        return None
    sizes = np.array([s.size for s in spreads], dtype=float)
    if size < sizes[0] or size > sizes[-1]:
        return None
    log_size = np.log(size)
    mean = np.exp(np.interp(log_size, np.log(sizes), np.log([s.mean for s in spreads])))
    sd = np.interp(log_size, np.log(sizes), [s.sd for s in spreads])
    return float(mean), float(sd)
