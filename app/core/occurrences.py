"""Previous occurrences in a sequence of type ids: the shared first step of every text-order statistic.

prev[i] is the last position j < i holding the same type as position i, or -1 when i is the type's first
occurrence. A stretch [s, s + L) then holds exactly as many types as it has positions i with prev[i] < s
(each type is counted at its first position inside the stretch), so segment type counts, moving-window TTRs
and MTLD factors all become sums over ``prev < s``.
"""

from __future__ import annotations

import numpy as np

CHUNK = 1 << 15
"""Tokens sorted at a time: small enough for the sort to stay in the processor cache."""


def position_dtype(tokens: int) -> type[np.signedinteger]:
    """int32 when every position fits (halves the memory of the position arrays), else int64."""
    return np.int32 if tokens < np.iinfo(np.int32).max else np.int64


def previous_occurrences(type_ids: np.ndarray, chunk: int = CHUNK) -> np.ndarray:
    """prev[i] = the previous position of the type at i, -1 for a first occurrence.

    O(N) passes in cache-sized chunks: a stable sort of the chunk groups its positions by type, so within a
    group each position's predecessor is the one sorted before it; the first of a group takes the type's last
    position in the earlier chunks (a table of one entry per type), and the group's last position updates it.
    Memory: the result (int32 for fewer than 2^31 tokens) and the per-type table; ``type_ids`` may be a
    read-only memmap of non-negative integers.
    """
    n = int(type_ids.size)
    prev = np.empty(n, dtype=position_dtype(n))
    if n == 0:
        return prev
    types = int(np.max(type_ids)) + 1
    if int(np.min(type_ids)) < 0:
        raise ValueError("type ids must be non-negative")
    last = np.full(types, -1, dtype=np.int64)
    narrow = np.uint16 if types <= 1 << 16 else None  # 16-bit keys sort by radix
    for base in range(0, n, chunk):
        ids = np.asarray(type_ids[base : base + chunk])
        order = np.argsort(ids.astype(narrow) if narrow else ids, kind="stable")
        grouped = ids[order]
        first_of_group = np.empty(ids.size, dtype=bool)
        first_of_group[0] = True
        np.not_equal(grouped[1:], grouped[:-1], out=first_of_group[1:])
        before = np.empty(ids.size, dtype=np.int64)
        before[0] = -1
        before[1:] = order[:-1] + base
        firsts = np.flatnonzero(first_of_group)
        before[firsts] = last[grouped[firsts]]
        prev[order + base] = before
        ends = np.append(firsts[1:] - 1, ids.size - 1)
        last[grouped[ends]] = order[ends] + base
    return prev


def reversed_previous(prev: np.ndarray, chunk: int = 1 << 20) -> np.ndarray:
    """The previous occurrences of the reversed text, from those of the text.

    Position i of the reversed text is N - 1 - i of the text, and its previous occurrence there is the next
    occurrence in the text: rev[N - 1 - prev[j]] = N - 1 - j for every j with prev[j] >= 0, -1 elsewhere.
    """
    n = prev.size
    rev = np.full(n, -1, dtype=prev.dtype)
    for base in range(0, n, chunk):
        p = np.asarray(prev[base : base + chunk], dtype=np.int64)
        seen = np.flatnonzero(p >= 0)
        rev[n - 1 - p[seen]] = n - 1 - base - seen
    return rev
