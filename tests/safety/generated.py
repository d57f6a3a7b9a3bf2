"""Generated texts whose exact counts are known in advance, computed with NumPy beside the text.

Words are spelled with the lower-case letters a-z only, all different (the strings of letters in order of
length: "a", ..., "z", "aa", "ab", ..., from a chosen length on), separated by spaces and line breaks, so the default tokenization
profile (runs of letters, case-folded) reads each written word as one token of its own type. The
expected number of tokens N, of types V and the spectrum V_m then follow from ``numpy.bincount`` of the
word indexes, independently of the ingestion code.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import chain, count, islice, product
from pathlib import Path
from string import ascii_lowercase

import numpy as np

WORDS_PER_LINE = 12


@dataclass(frozen=True)
class GeneratedText:
    """A text file and its expected totals and frequency spectrum {m: V_m}."""

    path: Path
    tokens: int
    types: int
    spectrum: dict[int, int]

    @property
    def size(self) -> int:
        return self.path.stat().st_size


def spellings(n: int, min_letters: int = 1) -> list[str]:
    """The first ``n`` strings of at least ``min_letters`` lower-case letters, by length, then alphabetically."""
    by_length = (map("".join, product(ascii_lowercase, repeat=length)) for length in count(min_letters))
    return list(islice(chain.from_iterable(by_length), n))


def write_text(
    path: Path,
    tokens: int,
    *,
    common_words: int = 50_000,
    exponent: float = 1.3,
    new_word_every: int = 4,
    min_letters: int = 1,
    random_state: int = 0,
) -> GeneratedText:
    """Write ``tokens`` words to ``path``: Zipf-distributed draws (``numpy.random.Generator.zipf``, folded
    into ``common_words`` ranks) with a never-seen word at every ``new_word_every``-th position, so that
    the vocabulary, and with it the number of rows the store writes, grows with the text. Words have at
    least ``min_letters`` letters (longer words: more bytes for as many tokens)."""
    rng = np.random.default_rng(random_state)
    ranks = rng.zipf(exponent, size=tokens) - 1
    ranks %= common_words
    ranks[::new_word_every] = common_words + np.arange(ranks[::new_word_every].size)
    counts = np.bincount(ranks)
    counts = counts[counts > 0]
    spectrum = np.bincount(counts)
    words = spellings(int(ranks.max()) + 1, min_letters)
    written = [words[r] for r in ranks.tolist()]
    with path.open("w", encoding="utf-8") as out:
        out.writelines(
            " ".join(written[i : i + WORDS_PER_LINE]) + "\n" for i in range(0, len(written), WORDS_PER_LINE)
        )
    return GeneratedText(
        path=path,
        tokens=int(tokens),
        types=int(counts.size),
        spectrum={m: int(v) for m, v in enumerate(spectrum) if v},
    )
