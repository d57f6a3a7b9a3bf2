"""Tokenization profiles: Unicode behaviour, validation, built-in variants.

Expected tokens follow from the Unicode Standard's character data as exposed by Python's ``unicodedata``
and ``str.casefold`` (Unicode CaseFolding.txt): casefold("ß") == "ss", casefold("İ") == "i" + U+0307,
casefold("ς") == "σ"; NFC composes "e" + U+0301 into "é".
"""

from __future__ import annotations

import re
import sys
import unicodedata
from typing import Any

import polars as pl
import pytest
import regex
from hypothesis import given
from hypothesis import strategies as st

from app.ingest.profiles import (
    BUILTIN_PROFILES,
    CHAR_UNIT_BLOCKS,
    CHAR_UNIT_SCRIPTS,
    NUMBER_TYPE,
    TokenizationProfile,
    get_profile,
)


def tokens(text: str, **profile: Any) -> list[str]:
    return TokenizationProfile(**profile).tokenizer().tokens(text)


def test_case_folding_uses_full_unicode_folding() -> None:
    # Unicode CaseFolding.txt: ß -> ss (full folding), final sigma ς -> σ, Σ -> σ.
    assert tokens("Straße STRASSE strasse") == ["strasse"] * 3
    assert tokens("ΣΟΦΟΣ σοφός σοφοσ") == ["σοφοσ", "σοφόσ", "σοφοσ"]
    assert tokens("Москва МОСКВА") == ["москва", "москва"]


def test_turkish_dotted_capital_i_folds_to_i_with_combining_dot() -> None:
    # CaseFolding.txt maps U+0130 to U+0069 U+0307 (language-neutral folding); U+0131 (dotless ı) has
    # no folding; the combining dot stays in the word as a mark.
    assert tokens("İstanbul") == ["i\u0307stanbul"]
    assert tokens("ılık ILIK") == ["ılık", "ilik"]
    assert tokens("İstanbul", case_fold=False) == ["İstanbul"]


def test_nfc_makes_canonically_equivalent_spellings_one_type() -> None:
    decomposed = "cafe\u0301"
    assert unicodedata.normalize("NFC", decomposed) == "café"
    assert tokens(f"café {decomposed}") == ["café", "café"]
    # Folding can decompose: casefold("ΐ") is iota + diaeresis + acute; NFC after folding recomposes, so
    # the precomposed small letter and the capital-with-marks spelling are one type.
    assert tokens("\u0390 \u03aa\u0301") == ["\u0390", "\u0390"]


def test_combining_marks_stay_inside_words() -> None:
    # "q" + U+0323 (dot below) has no precomposed form, so the mark survives NFC and joins the word.
    assert tokens("q\u0323uick") == ["q\u0323uick"]
    # Devanagari vowel signs are marks (category Mc/Mn): "हिन्दी" is one word.
    assert tokens("हिन्दी भाषा") == ["हिन्दी", "भाषा"]
    # A mark with no letter before it is not a word.
    assert tokens("\u0301 ,\u0308x") == ["x"]


def test_inner_apostrophes_and_hyphens() -> None:
    text = "Don't l’homme rock'n'roll 'tis dogs' well-known non\u2010trivial -dash- a--b"
    assert tokens(text) == [
        "don't", "l’homme", "rock'n'roll", "tis", "dogs", "well-known", "non\u2010trivial", "dash", "a", "b",
    ]  # fmt: skip
    assert tokens(text, apostrophes="split")[:6] == ["don", "t", "l", "homme", "rock", "n"]
    assert tokens("well-known", hyphens="split") == ["well", "known"]
    assert tokens("it's well-known", apostrophes="split", hyphens="split") == ["it", "s", "well", "known"]


def test_soft_hyphen_is_removed() -> None:
    assert tokens("Silben\u00adtrennung") == ["silbentrennung"]


def test_number_modes() -> None:
    text = "In 1984, 3.14 and 1,000 mp3 files; ٣٤ Arabic-Indic."
    assert tokens(text) == ["in", "and", "mp", "files", "arabic-indic"]
    assert tokens(text, numbers="keep") == [
        "in",
        "1984",
        "3.14",
        "and",
        "1,000",
        "mp",
        "3",
        "files",
        "٣٤",
        "arabic-indic",
    ]
    collapsed = tokens(text, numbers="collapse")
    assert collapsed.count(NUMBER_TYPE) == 5
    assert collapsed[:3] == ["in", NUMBER_TYPE, NUMBER_TYPE]


def test_char_unit_scripts_give_one_token_per_character() -> None:
    assert tokens("東京に行きます。") == ["東", "京", "に", "行", "き", "ま", "す"]
    assert tokens("カタカナ") == ["カ", "タ", "カ", "ナ"]
    # Thai: a consonant with its following combining marks is one character unit.
    assert tokens("ที่นี่") == ["ที่", "นี่"]
    assert tokens("Tokyo東京city") == ["tokyo", "東", "京", "city"]
    assert tokens("東京 ภาษา", char_unit=False) == ["東京", "ภาษา"]
    # Korean is written with spaces: Hangul is not a character-unit script.
    assert tokens("한국어 문장") == ["한국어", "문장"]


def test_char_unit_blocks_cover_every_letter_and_mark_of_those_scripts() -> None:
    # The fast path skips the character-unit pattern for text without these blocks, which is only
    # correct if the blocks hold every letter and mark of the scripts, as the tokenizer's regular-expression
    # engine (polars) and the regex module each have them in their Unicode data.
    everything = [chr(c) for c in range(sys.maxunicode + 1) if not 0xD800 <= c <= 0xDFFF]
    scripts = "".join(f"\\p{{{s}}}" for s in CHAR_UNIT_SCRIPTS)
    in_polars = pl.Series(everything).str.contains(f"^[[{scripts}]&&[\\p{{L}}\\p{{M}}]]$").to_list()
    in_regex = regex.findall(f"(?V1)[[{scripts}]&&[\\p{{L}}\\p{{M}}]]", "".join(everything))
    members = {c for c, member in zip(everything, in_polars, strict=True) if member} | set(in_regex)
    assert len(members) > 90_000  # the CJK unified ideographs alone number over 90,000
    outside = [c for c in members if not re.match(CHAR_UNIT_BLOCKS, c)]
    assert outside == []


_MIXED = st.text(
    alphabet=st.sampled_from(
        list("aZé\u0301ßİıΣςΐ ,.;'’-\u2010<\u0338\n\t\u00a0\u00ad5٣東にภ\u0e35\u0e48한🙂")
    ),
    max_size=60,
)


@given(_MIXED)
def test_fast_path_agrees_with_the_character_unit_pattern(text: str) -> None:
    # Appending a Han character forces the character-unit pattern over the whole text; the tokens of the
    # text before it must not change.
    for name in ("default", "keep-numbers", "case-sensitive"):
        tokenizer = get_profile(name).tokenizer()
        assert tokenizer.tokens(text + " 東") == [*tokenizer.tokens(text), "東"]


def test_default_profile_matches_documented_fields() -> None:
    profile = get_profile("default")
    assert profile == TokenizationProfile()
    assert profile.to_dict() == {
        "name": "default",
        "case_fold": True,
        "numbers": "drop",
        "apostrophes": "keep",
        "hyphens": "keep",
        "char_unit": True,
    }


@pytest.mark.parametrize("name", sorted(BUILTIN_PROFILES))
def test_builtin_profiles_round_trip_through_dict(name: str) -> None:
    profile = get_profile(name)
    assert profile.name == name
    assert TokenizationProfile.from_dict(profile.to_dict()) == profile


def test_builtin_profiles_differ_from_each_other() -> None:
    sample = "Don't re-read 1,000 Pages; 東京"
    results = {name: tuple(p.tokenizer().tokens(sample)) for name, p in BUILTIN_PROFILES.items()}
    assert len(set(results.values())) == len(results)


@pytest.mark.parametrize(
    ("data", "message"),
    [
        ({"numbers": "sometimes"}, "'numbers' must be one of 'drop', 'keep', 'collapse'"),
        ({"apostrophes": "merge"}, "'apostrophes' must be one of 'keep', 'split'"),
        ({"case_fold": "yes"}, "'case_fold' must be true or false"),
        ({"name": ""}, "name must be a non-empty string"),
        ({"lowercase": True}, "unknown tokenization profile field(s): lowercase"),
    ],
)
def test_from_dict_rejects_invalid_profiles(data: dict[str, object], message: str) -> None:
    with pytest.raises(ValueError) as excinfo:
        TokenizationProfile.from_dict(data)
    assert message in str(excinfo.value)


def test_from_dict_rejects_non_objects_and_fills_defaults() -> None:
    with pytest.raises(ValueError, match="JSON object"):
        TokenizationProfile.from_dict(["default"])  # a list, not a JSON object
    assert TokenizationProfile.from_dict({"name": "mine", "hyphens": "split"}) == TokenizationProfile(
        name="mine", hyphens="split"
    )


def test_get_profile_names_the_available_profiles() -> None:
    with pytest.raises(ValueError, match="unknown tokenization profile 'nope' \\(available: default, "):
        get_profile("nope")
