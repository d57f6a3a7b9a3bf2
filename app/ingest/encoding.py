"""Finding the encoding of a plain-text file from a sample of its first bytes, and decoding it in blocks.

Order of the checks:
1. A byte-order mark wins: UTF-8 (EF BB BF), UTF-32 LE/BE, UTF-16 LE/BE. The decoder strips it.
2. Without a mark, UTF-16 is recognised by its NUL bytes: text in UTF-16 has a NUL in nearly every space,
   line break and Latin letter, all on odd offsets (little-endian) or all on even ones (big-endian). When at
   least ``UTF16_MIN_NUL_SHARE`` of the bytes are NULs, ``UTF16_NUL_PARITY`` of them share one parity and the sample decodes in that byte order to
   text (at least ``UTF16_TEXT_SHARE`` letters, marks, digits, punctuation, symbols and whitespace), it is
   UTF-16 LE or BE.
   Otherwise NUL bytes, or more than ``CONTROL_SHARE`` of other C0 control bytes, mean binary data.
3. A sample that decodes as UTF-8 is UTF-8 (pure ASCII included); so is a mixed sample whose valid UTF-8
   multi-byte sequences outnumber its stray high bytes. Bytes that are not valid UTF-8 are decoded one by one
   as Windows-1252, the usual culprit in mixed files.
4. Otherwise charset-normalizer chooses. On short samples it often cannot tell the Western European
   single-byte code pages apart (it may pick Latin-2 or Latin-6 for Dutch or French), so Windows-1252 (a
   superset of the printable Latin-1 range) is taken whenever charset-normalizer rates it, or a code page
   that decodes the sample identically, at least as coherent with the detected language as its best
   guess: Western European text is by far the most common case (common practice).
   Undecodable bytes later in the file become U+FFFD, which never forms part of a word.
"""

from __future__ import annotations

import codecs
import re
import unicodedata
from collections.abc import Iterator
from dataclasses import dataclass
from typing import BinaryIO

from charset_normalizer import from_bytes

SAMPLE_BYTES = 1 << 16
"""How much of the start of a file the detection looks at."""

CONTROL_SHARE = 0.05
"""Share of C0 control bytes (other than tab, line feed, vertical tab, form feed, carriage return, escape
and the old end-of-file mark ^Z) above which a sample is taken for binary data (common practice)."""

UTF16_NUL_PARITY = 0.95
"""Share of a sample's NUL bytes that must sit at offsets of one parity for it to be read as UTF-16."""

UTF16_MIN_NUL_SHARE = 0.02
"""Share of NUL bytes below which a sample is not taken for UTF-16 (a space every 25 characters is enough)."""

UTF16_TEXT_SHARE = 0.98
"""Share of the decoded characters that must be text (not controls, unassigned or private-use code points,
nor lone surrogates) for a sample without a byte-order mark to be read as UTF-16 (common practice)."""

_BOMS = (
    (codecs.BOM_UTF32_LE, "utf-32"),
    (codecs.BOM_UTF32_BE, "utf-32"),
    (codecs.BOM_UTF8, "utf-8-sig"),
    (codecs.BOM_UTF16_LE, "utf-16"),
    (codecs.BOM_UTF16_BE, "utf-16"),
)
_CONTROL_BYTES = bytes(b for b in range(32) if b not in b"\t\n\v\f\r\x1a\x1b")
_PREFERRED_SINGLE_BYTE = "cp1252"
_UTF8_FALLBACK = "lexigrowth.cp1252-fallback"


def _decode_stray_bytes_as_cp1252(exc: UnicodeError) -> tuple[str, int]:
    if not isinstance(exc, UnicodeDecodeError):
        raise exc
    return exc.object[exc.start : exc.end].decode(_PREFERRED_SINGLE_BYTE, errors="replace"), exc.end


codecs.register_error(_UTF8_FALLBACK, _decode_stray_bytes_as_cp1252)


@dataclass(frozen=True)
class Encoding:
    """A Python codec name and the error handler to decode with."""

    codec: str
    errors: str = "replace"


def bom_encoding(sample: bytes) -> str | None:
    """The codec named by a byte-order mark at the start of ``sample``, if any."""
    for bom, codec in _BOMS:
        if sample.startswith(bom):
            return codec
    return None


def _text_share(text: str) -> float:
    if not text:
        return 0.0
    wrong = sum(
        1 for ch in text if ch not in "\t\n\r\f\v" and unicodedata.category(ch) in ("Cc", "Cn", "Co", "Cs")
    )
    return 1 - wrong / len(text)


def utf16_without_bom(sample: bytes, complete: bool) -> str | None:
    """ "utf-16-le" or "utf-16-be" for a sample that is UTF-16 text without a byte-order mark, else None."""
    odd, even = sample[1::2].count(0), sample[0::2].count(0)
    if not sample or odd + even < UTF16_MIN_NUL_SHARE * len(sample):
        return None
    odd = odd / (odd + even)
    if odd >= UTF16_NUL_PARITY:
        codec = "utf-16-le"
    elif odd <= 1 - UTF16_NUL_PARITY:
        codec = "utf-16-be"
    else:
        return None
    usable = sample if complete else sample[: len(sample) & ~1]
    try:
        text = codecs.getincrementaldecoder(codec)().decode(usable, final=complete)
    except UnicodeDecodeError:
        return None
    return codec if _text_share(text) >= UTF16_TEXT_SHARE else None


def looks_binary(sample: bytes) -> bool:
    """NUL bytes, or too many other control bytes, in a sample without a byte-order mark."""
    if not sample:
        return False
    if b"\x00" in sample:
        return True
    controls = len(sample) - len(sample.translate(None, delete=_CONTROL_BYTES))
    return controls > CONTROL_SHARE * len(sample)


def _is_utf8(sample: bytes, complete: bool) -> bool:
    try:
        codecs.getincrementaldecoder("utf-8")().decode(sample, final=complete)
    except UnicodeDecodeError:
        return False
    return True


_UTF8_SEQUENCE = re.compile(rb"[\xc2-\xdf][\x80-\xbf]|[\xe0-\xef][\x80-\xbf]{2}|[\xf0-\xf4][\x80-\xbf]{3}")


def _mostly_utf8(sample: bytes) -> bool:
    """A mixed file: valid UTF-8 multi-byte sequences outnumber the stray high bytes around them.

    Single-byte encodings (Latin-1, Windows-125x) almost never form valid UTF-8 sequences by chance, so a
    sample with many of them and a few stray bytes is UTF-8 with pasted-in Windows-1252 pieces.
    """
    sequences = _UTF8_SEQUENCE.findall(sample)
    high_in_sequences = sum(len(s) for s in sequences)
    stray = sum(1 for byte in sample if byte >= 0x80) - high_in_sequences
    return len(sequences) > 0 and stray <= len(sequences)


def detect_encoding(sample: bytes, complete: bool) -> Encoding:
    """The encoding of a file from its first bytes (``complete``: the sample is the whole file).

    Raises ValueError with a reason for binary data or when no encoding fits.
    """
    codec = bom_encoding(sample)
    if codec is not None:
        return Encoding(codec)
    codec = utf16_without_bom(sample, complete)
    if codec is not None:
        return Encoding(codec)
    if looks_binary(sample):
        raise ValueError(
            "looks like binary data, not text (text in UTF-16 or UTF-32 without a byte-order mark that "
            "cannot be told from binary data: save it as UTF-8, or with a byte-order mark)"
        )
    if _is_utf8(sample, complete) or _mostly_utf8(sample):
        return Encoding("utf-8", _UTF8_FALLBACK)
    matches = from_bytes(sample)
    best = matches.best()
    if best is None:
        raise ValueError("could not detect the text encoding")
    as_coherent = {
        name for match in matches if match.coherence >= best.coherence for name in match.could_be_from_charset
    }
    return Encoding(_PREFERRED_SINGLE_BYTE if _PREFERRED_SINGLE_BYTE in as_coherent else best.encoding)


def decode_blocks(stream: BinaryIO, encoding: Encoding, block_bytes: int) -> Iterator[tuple[str, int]]:
    """Decode ``stream`` incrementally: (text, bytes read so far) per block; a byte-order mark is dropped."""
    decoder = codecs.getincrementaldecoder(encoding.codec)(errors=encoding.errors)
    consumed = 0
    while data := stream.read(block_bytes):
        consumed += len(data)
        text = decoder.decode(data)
        if text:
            yield text, consumed
    tail = decoder.decode(b"", final=True)
    if tail:
        yield tail, consumed
