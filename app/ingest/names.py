"""Names people give (corpus names, label keys and values, profile names): one line of visible text.

Every run of whitespace (tabs and line breaks included) becomes one space and the ends are trimmed. Other
control characters (NUL, escape, ...), lone surrogates and the bidirectional embedding, override and
isolate controls, which can make a name display as something else (Unicode Technical Report #36, Unicode
Security Considerations, section 2.4), are refused with a message naming the character; so is a name
longer than its limit.
"""

from __future__ import annotations

import re
import unicodedata

_WHITESPACE = re.compile(r"\s+")
_BIDI_CONTROLS = frozenset("\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069")


def clean_name(value: str, what: str, max_chars: int) -> str:
    """``value`` as one trimmed line; ValueError saying what is wrong with it (starting with ``what``)."""
    text = _WHITESPACE.sub(" ", value).strip()
    for ch in text:
        if ch in _BIDI_CONTROLS or unicodedata.category(ch) in ("Cc", "Cs"):
            raise ValueError(f"{what}: remove the control character U+{ord(ch):04X}")
    if len(text) > max_chars:
        raise ValueError(f"{what}: at most {max_chars} characters (this one has {len(text):,})")
    return text
