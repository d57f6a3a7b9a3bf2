"""Tokenization profiles: the named, recorded rules that turn text into word tokens.

Every corpus stores the profile it was counted with (``TokenizationProfile.to_dict()``), and every engine
(local, parallel, cluster) tokenizes through ``TokenizationProfile.tokenizer()``, so one definition of a
word holds everywhere.

The default profile
-------------------
1. The text is normalised to Unicode NFC (composed characters), so "é" typed as "e" + combining acute and
   "é" as one character are the same word. Soft hyphens (U+00AD) are removed.
2. It is case-folded with Python's ``str.casefold`` (Unicode full case folding, language-neutral): "The"
   and "the" are one type, German "Straße" and "STRASSE" both become "strasse", Greek final sigma "ς"
   becomes "σ". Turkish dotted capital "İ" folds to "i" + combining dot above, which is not the same as
   "i"; dotless "ı" stays "ı". The folded text is normalised to NFC again.
3. A word is a letter of any script (Unicode category L) followed by any run of letters and combining
   marks (category M); a combining mark with no letter before it is not a word.
   An apostrophe (' or ’) or a hyphen (-, U+2010 or U+2011) between two letters stays inside the word:
   "don't", "l’homme", "well-known" and "rock'n'roll" are one token each; "'tis" gives "tis" and
   "dogs'" gives "dogs".
4. Numbers (runs of decimal digits, optionally with inner "." or ",", such as 1,000 or 3.14) are dropped.
   Digits next to letters split them: "mp3" gives "mp".
5. In scripts written without spaces between words (Han, Hiragana, Katakana, Thai, Lao, Khmer, Myanmar,
   Tibetan) every character, with the combining marks that follow it, is one token: "東京に" gives
   "東", "京", "に".
6. Everything else (punctuation, symbols, emoji, whitespace) separates tokens and is not counted.
7. A token longer than ``MAX_WORD_CHARS`` characters is not a word (a run of letters without a break,
   such as an encoded blob or a script written without spaces under ``no-char-units``) and is not counted:
   no word stored, shown or downloaded is longer (common practice: the longest dictionary words are well
   under 100 letters).

Steps 3 to 6 run in native code: the token pattern is a regular expression in the syntax of Rust's
``regex`` crate, matched by polars (``Series.str.extract_all``), so the same compiled engine, with the same
Unicode character data, tokenizes in every engine and in ``Tokenizer.tokens``. Steps 1 and 2 use Python's
``unicodedata`` and ``str.casefold``.

Named variants in ``BUILTIN_PROFILES``: "case-sensitive" (no case folding), "split-clitics" (apostrophes
split words: "don't" gives "don" and "t"), "split-hyphens" ("well-known" gives "well" and "known"),
"numbers-as-one" (every number becomes the single type "#num"), "keep-numbers" (each number is its own
type, "1,000" and "1000" differ) and "no-char-units" (runs of Han, Thai, ... letters are words like any
other run of letters).
"""

from __future__ import annotations

import unicodedata
from collections.abc import Sequence
from dataclasses import asdict, dataclass, fields
from typing import TYPE_CHECKING, Any, Literal, get_args

import numpy as np

from app.ingest.names import clean_name

if TYPE_CHECKING:
    import polars as pl

NumbersMode = Literal["drop", "keep", "collapse"]
SplitMode = Literal["keep", "split"]

NUMBER_TYPE = "#num"
"""The single type every number becomes with ``numbers="collapse"``."""
MAX_WORD_CHARS = 100
"""Longer tokens are not counted (step 7)."""
MAX_PROFILE_NAME = 64

_APOSTROPHES = "'\u2019"
_HYPHENS = "\\-\u2010\u2011"
_SOFT_HYPHEN = "\u00ad"

CHAR_UNIT_SCRIPTS = ("Han", "Hiragana", "Katakana", "Thai", "Lao", "Khmer", "Myanmar", "Tibetan")
"""Scripts written without spaces between words: with ``char_unit`` each of their letters is a token."""

_CHAR_UNIT_SET = "".join(f"\\p{{{script}}}" for script in CHAR_UNIT_SCRIPTS)

CHAR_UNIT_BLOCKS = (
    "[\u0e00-\u109f\u1780-\u19ff\u2e80-\u9fff\ua9e0-\uaa7f\uf900-\ufaff\uff00-\uffef"
    "\U00011600-\U0001b2ff\U00020000-\U0003ffff]"
)
"""A character class (valid in Python's ``re`` and in Rust's ``regex``) of the Unicode blocks that hold every
letter and mark of ``CHAR_UNIT_SCRIPTS`` (a superset, checked by the tests). Text without any of these
characters is tokenized with the simpler, faster pattern, which gives the same tokens there."""


@dataclass(frozen=True)
class TokenizationProfile:
    """The rules that turn text into word tokens (see the module docstring for the default)."""

    name: str = "default"
    case_fold: bool = True
    numbers: NumbersMode = "drop"
    apostrophes: SplitMode = "keep"
    hyphens: SplitMode = "keep"
    char_unit: bool = True

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not self.name.strip():
            raise ValueError(f"profile name must be a non-empty string, not {self.name[:MAX_PROFILE_NAME]!r}")
        if clean_name(self.name, "profile name", MAX_PROFILE_NAME) != self.name:
            raise ValueError(
                "profile name: no spaces at either end and no runs of spaces, tabs or line breaks"
            )
        for flag in ("case_fold", "char_unit"):
            if not isinstance(getattr(self, flag), bool):
                raise ValueError(f"profile field {flag!r} must be true or false, not {getattr(self, flag)!r}")
        for choice, mode in (("numbers", NumbersMode), ("apostrophes", SplitMode), ("hyphens", SplitMode)):
            allowed = get_args(mode)
            if getattr(self, choice) not in allowed:
                options = ", ".join(repr(a) for a in allowed)
                raise ValueError(
                    f"profile field {choice!r} must be one of {options}, not {getattr(self, choice)!r}"
                )

    def to_dict(self) -> dict[str, Any]:
        """All fields as a JSON-ready dict (what a corpus records)."""
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> TokenizationProfile:
        """Rebuild a profile from ``to_dict()`` output; missing fields take their defaults.

        Raises ValueError for a non-dict, unknown fields or invalid values.
        """
        if not isinstance(data, dict):
            raise ValueError(f"a tokenization profile must be a JSON object, not {type(data).__name__}")
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(data) - known)
        if unknown:
            raise ValueError(
                f"unknown tokenization profile field(s): {', '.join(map(str, unknown))} "
                f"(known: {', '.join(sorted(known))})"
            )
        return cls(**data)

    def tokenizer(self) -> Tokenizer:
        """The compiled tokenizer for this profile."""
        return Tokenizer(self)


def _word_pattern(profile: TokenizationProfile, char_unit_scripts: bool) -> str:
    """A regular expression (Rust ``regex`` crate syntax, with its class set operations ``--`` and
    ``&&``) for one token under ``profile``.

    With ``char_unit_scripts`` the letters of ``CHAR_UNIT_SCRIPTS`` are excluded from words and match one at
    a time (with their combining marks); without it the pattern is only valid on text that has none.
    """
    if char_unit_scripts:
        run = f"[\\p{{L}}--[{_CHAR_UNIT_SET}]][[\\p{{L}}\\p{{M}}]--[{_CHAR_UNIT_SET}]]*"
    else:
        run = "\\p{L}[\\p{L}\\p{M}]*"
    joiners = (_APOSTROPHES if profile.apostrophes == "keep" else "") + (
        _HYPHENS if profile.hyphens == "keep" else ""
    )
    word = f"{run}(?:[{joiners}]{run})*" if joiners else run
    alternatives = [word]
    if char_unit_scripts:
        alternatives.append("[[" + _CHAR_UNIT_SET + "]&&\\p{L}]\\p{M}*")
    if profile.numbers != "drop":
        alternatives.append("\\p{Nd}+(?:[.,]\\p{Nd}+)*")
    return "|".join(alternatives)


class Tokenizer:
    """A profile ready to run: the normalisation in Python, then one regular expression and the profile's
    mapping in polars.

    ``tokens(text)`` is a pure function of the text: NFC, soft hyphens removed, case folding (then NFC
    again, since folding may decompose), then the token pattern.
    """

    def __init__(self, profile: TokenizationProfile) -> None:
        self.profile = profile
        self._plain = _word_pattern(profile, char_unit_scripts=False)
        self._char_units = _word_pattern(profile, char_unit_scripts=True) if profile.char_unit else None

    def normalize(self, text: str) -> str:
        """The text the pattern sees: NFC, without soft hyphens, case-folded if the profile says so."""
        text = unicodedata.normalize("NFC", text)
        if _SOFT_HYPHEN in text:
            text = text.replace(_SOFT_HYPHEN, "")
        if self.profile.case_fold:
            text = unicodedata.normalize("NFC", text.casefold())
        return text

    def token_series(self, text: str) -> pl.Series:
        """The word tokens of ``text`` in text order, as a polars string Series (no Python object per
        token)."""
        return self.token_series_of([text])[0]

    def token_series_of(self, texts: Sequence[str]) -> tuple[pl.Series, np.ndarray]:
        """The word tokens of several texts, one text after the other, and how many tokens each text has
        (one pass of polars over all of them: a text of a few words costs little)."""
        # Imported here: the process that only merges the counts of worker processes never loads it.
        import polars as pl

        column = pl.Series("token", [self.normalize(text) for text in texts], dtype=pl.String)
        # The pattern with character units gives the plain pattern's tokens on text without those scripts.
        use_char_units = (
            self._char_units is not None
            and not all(text.isascii() for text in column)
            and column.str.contains(CHAR_UNIT_BLOCKS).any()
        )
        pattern = self._char_units if use_char_units else self._plain
        found = column.str.extract_all(pattern)
        # Exploding the list of an empty text gives one null: tokens are never null otherwise.
        row = np.repeat(np.arange(len(texts)), found.list.len().fill_null(0).to_numpy())
        tokens = found.explode().drop_nulls()
        kept = (tokens.str.len_chars() <= MAX_WORD_CHARS).to_numpy()
        tokens = tokens.filter(kept)
        lengths = np.bincount(row[kept], minlength=len(texts)).astype(np.int64)
        if self.profile.numbers == "collapse":
            # A token starting with a decimal digit is a number: words start with a letter or mark.
            tokens = tokens.str.replace(r"^\p{Nd}.*", NUMBER_TYPE, literal=False)
        return tokens, lengths

    def tokens(self, text: str) -> list[str]:
        """The word tokens of ``text`` in text order."""
        return self.token_series(text).to_list()


BUILTIN_PROFILES: dict[str, TokenizationProfile] = {
    p.name: p
    for p in (
        TokenizationProfile(),
        TokenizationProfile(name="case-sensitive", case_fold=False),
        TokenizationProfile(name="split-clitics", apostrophes="split"),
        TokenizationProfile(name="split-hyphens", hyphens="split"),
        TokenizationProfile(name="numbers-as-one", numbers="collapse"),
        TokenizationProfile(name="keep-numbers", numbers="keep"),
        TokenizationProfile(name="no-char-units", char_unit=False),
    )
}


def get_profile(name: str) -> TokenizationProfile:
    """The built-in profile called ``name``; ValueError naming the available ones otherwise."""
    try:
        return BUILTIN_PROFILES[name]
    except KeyError:
        raise ValueError(
            f"unknown tokenization profile {name!r} (available: {', '.join(BUILTIN_PROFILES)})"
        ) from None
