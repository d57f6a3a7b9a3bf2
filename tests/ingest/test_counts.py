"""Reading word-count lists and spectrum tables (app.ingest.counts): delimiters, encodings, normalisation.

References: Python's unicodedata (NFC) and str.casefold define the folded words a profile must produce
(README, "The default tokenization profile"); the encodings are written by Python's own codecs.
"""

from __future__ import annotations

import unicodedata

import pytest

from app.ingest.counts import CountsInputError, read_spectrum, read_word_counts
from app.ingest.profiles import BUILTIN_PROFILES


def _file(tmp_path, content: bytes, name: str = "list.csv"):
    path = tmp_path / name
    path.write_bytes(content)
    return [(path, name)]


@pytest.mark.parametrize("delimiter", [",", "\t", ";", "   "])
def test_delimiters_and_header_are_detected(tmp_path, delimiter):
    rows = ["word", "count"], ["apple", "3"], ["pear", "2"]
    content = "\n".join(delimiter.join(r) for r in rows).encode()
    assert read_word_counts(_file(tmp_path, content), BUILTIN_PROFILES["default"]) == {"apple": 3, "pear": 2}


@pytest.mark.parametrize("codec", ["utf-8-sig", "utf-16", "cp1252"])
def test_encodings_are_detected(tmp_path, codec):
    content = "word,count\nCafé,2\nnaïve,5\ncafé,1\n".encode(codec)
    counts = read_word_counts(_file(tmp_path, content), BUILTIN_PROFILES["default"])
    assert counts == {"café": 3, "naïve": 5}


def test_words_are_normalised_and_merged_as_the_profile_says(tmp_path):
    words = ["Stra\u00dfe", "STRASSE", "Cafe\u0301", "caf\u00e9", "\u0130stanbul"]
    content = "".join(f"{w},{i + 1}\n" for i, w in enumerate(words)).encode()
    folded = read_word_counts(_file(tmp_path, content), BUILTIN_PROFILES["default"])
    expected: dict[str, int] = {}
    for i, w in enumerate(words):  # stdlib: NFC, casefold, NFC again
        key = unicodedata.normalize("NFC", unicodedata.normalize("NFC", w).casefold())
        expected[key] = expected.get(key, 0) + i + 1
    assert folded == expected and folded["strasse"] == 3 and folded["café"] == 7
    kept = read_word_counts(_file(tmp_path, content), BUILTIN_PROFILES["case-sensitive"])
    assert (kept["Stra\u00dfe"], kept["STRASSE"], kept["Café"], kept["café"]) == (1, 2, 3, 4)


def test_counts_of_several_files_are_added(tmp_path):
    first = _file(tmp_path, b"the,3\ncat,1\n", "a.csv")
    second = _file(tmp_path, b"The\t2\ndog\t1\n", "b.tsv")
    assert read_word_counts(first + second, BUILTIN_PROFILES["default"]) == {"the": 5, "cat": 1, "dog": 1}


def test_a_header_is_only_accepted_as_the_first_row(tmp_path):
    with pytest.raises(CountsInputError, match="line 2"):
        read_word_counts(_file(tmp_path, b"the,3\nword,count\n"), BUILTIN_PROFILES["default"])


def test_spectrum_with_comments_header_and_zero_rows(tmp_path):
    content = b"# from a published table\n# tokens: 17\n# types: 8\nm\tV_m\n1\t5\n2\t2\n3\t0\n8\t1\n"
    parsed = read_spectrum(_file(tmp_path, content, "s.tsv"))
    assert parsed.pairs == [(1, 5), (2, 2), (8, 1)]
    assert (parsed.declared_tokens, parsed.declared_types) == (17, 8)
    assert sum(m * v for m, v in parsed.pairs) == 17


def test_spectrum_limits_hold_at_their_edges():
    """Each limit (README, "Corpora from counts") accepts its value and refuses one more."""
    from app.ingest.counts import MAX_FREQUENCY, MAX_SPECTRUM_ROWS, MAX_TOKENS, MAX_TYPES, check_spectrum

    assert check_spectrum([(1, 1), (MAX_FREQUENCY, 1)], None, None, "s") == (MAX_FREQUENCY + 1, 2)
    with pytest.raises(CountsInputError, match="largest frequency 10,000,001"):
        check_spectrum([(1, 1), (MAX_FREQUENCY + 1, 1)], None, None, "s")
    rows = [(m, 1) for m in range(1, MAX_SPECTRUM_ROWS + 1)]
    assert check_spectrum(rows, None, None, "s")[1] == MAX_SPECTRUM_ROWS
    with pytest.raises(CountsInputError, match="100,001 rows"):
        check_spectrum([*rows, (MAX_SPECTRUM_ROWS + 1, 1)], None, None, "s")
    assert check_spectrum([(1, MAX_TYPES)], None, None, "s") == (MAX_TYPES, MAX_TYPES)
    with pytest.raises(CountsInputError, match="5,000,001 types"):
        check_spectrum([(1, MAX_TYPES + 1)], None, None, "s")
    at_most = [(MAX_FREQUENCY, MAX_TOKENS // MAX_FREQUENCY)]
    assert check_spectrum(at_most, None, None, "s")[0] == MAX_TOKENS
    with pytest.raises(CountsInputError, match="more than the 100,000,000,000"):
        check_spectrum([(1, 1), *at_most], None, None, "s")


def test_words_of_a_list_follow_the_tokenizers_length_limit(tmp_path):
    from app.ingest.profiles import MAX_WORD_CHARS

    longest = "w" * MAX_WORD_CHARS
    content = f"{longest},2\n".encode()
    assert read_word_counts(_file(tmp_path, content), BUILTIN_PROFILES["default"]) == {longest: 2}
    with pytest.raises(CountsInputError, match="longer than 100 characters"):
        read_word_counts(_file(tmp_path, f"{longest}w,2\n".encode()), BUILTIN_PROFILES["default"])
    for bad in ("tab\u202eto", "esc\x1bx"):
        with pytest.raises(CountsInputError, match="not a word"):
            read_word_counts(_file(tmp_path, f"{bad},2\n".encode()), BUILTIN_PROFILES["default"])
    with pytest.raises(CountsInputError):  # a NUL byte: the file is not read as UTF-8 text at all
        read_word_counts(_file(tmp_path, b"nul\x00x,2\n"), BUILTIN_PROFILES["default"])
