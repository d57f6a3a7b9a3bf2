"""The generated texts of the safety tests hold exactly the counts they announce."""

from __future__ import annotations

from collections import Counter

from tests.safety.generated import spellings, write_text


def test_announced_counts_match_an_independent_count(tmp_path):
    text = write_text(tmp_path / "t.txt", 5_000, common_words=300, new_word_every=3, min_letters=2)
    # Reference: collections.Counter over the whitespace-separated words of the file as written.
    counts = Counter(text.path.read_text(encoding="utf-8").split())
    assert all(word.isascii() and word.isalpha() and word.islower() for word in counts)
    assert (text.tokens, text.types) == (sum(counts.values()), len(counts))
    assert text.spectrum == dict(Counter(counts.values()))
    assert sum(counts.values()) == sum(m * v for m, v in text.spectrum.items())


def test_spellings_are_distinct_and_ordered_by_length():
    words = spellings(26 + 26**2 + 5)
    assert len(set(words)) == len(words)
    assert words[:3] == ["a", "b", "c"] and words[26] == "aa" and words[-1] == "aae"
    assert spellings(2, min_letters=3) == ["aaa", "aab"]
