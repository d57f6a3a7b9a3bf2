"""Corpora that arrive as numbers instead of text: word-count lists, frequency spectra and corpus bundles.

- **Word counts**: CSV/TSV rows ``word, count`` (a header row is optional; the delimiter -- tab, comma,
  semicolon or blanks -- and the encoding are detected). Each word is normalised with the chosen profile's
  Unicode normalisation and case folding (``Tokenizer.normalize``), so the counts compare with texts counted
  under that profile, and counts of the same normalised word are added up. Rows ``text, word, count`` carry
  a text column: the corpus then has texts (rows of one text name, in any file, make one text).
- **Spectrum**: rows ``frequency, types``: V_m, the number of types occurring exactly m times. Lines starting
  with ``#`` are comments; ``# tokens: N`` and ``# types: V`` declare totals that the rows must agree with.
- **Bundle**: our own exchange format, one JSON document, plain or gzip-compressed (``encode_bundle``,
  ``decode_bundle``; the fields are described in the README). Its SHA-256 checksum is taken over the canonical
  JSON of every other field (keys sorted, no blanks, UTF-8).

Every refusal is an ``IngestionInputError``-like ``CountsInputError`` naming the file and the line.
"""

from __future__ import annotations

import csv
import gzip
import hashlib
import io
import json
import math
import re
import zlib
from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np

from app.ingest.counting import PREFIX_FRACTIONS, prefix_length
from app.ingest.encoding import SAMPLE_BYTES, detect_encoding
from app.ingest.names import clean_name
from app.ingest.profiles import MAX_WORD_CHARS, TokenizationProfile
from app.ingest.texts import TextCounts

WORD_COUNTS = "word-counts"
SPECTRUM = "spectrum"
BUNDLE = "bundle"
TEXT = "text"
SOURCE_KINDS = (TEXT, WORD_COUNTS, SPECTRUM, BUNDLE)

BUNDLE_FORMAT = "lexigrowth-corpus-bundle"
BUNDLE_VERSION = 2
"""The bundle format version this program writes and the newest it reads."""

MAX_FREQUENCY = 10**7
"""Largest count of one word, and so largest frequency m of a spectrum, accepted from a file or a bundle. The
exact random-order statistics computed before a corpus is stored convolve the spectrum with itself up to
twice this frequency: measured 0.3 s at 10^6, 3.1 s of CPU and 1.2 GB at 10^7, growing linearly (10^8 would
cost about 30 s and 12 GB). The most frequent word of a 1 GB English text occurs about 10^7 times."""
MAX_TYPES = 5_000_000
"""Most types (rows of a word-count list, sum of V_m of a spectrum) accepted from a file or a bundle: a
word list of this size is about 5 million rows in the store (a 200 MB text of generated words has 0.8
million types)."""
MAX_TEXT_NAME = 200
"""Longest text name of a word-count list's text column (as a corpus name)."""
MAX_SPECTRUM_ROWS = 100_000
"""Most distinct frequencies (spectrum rows) accepted: a text of N tokens has fewer than sqrt(2 N) of them
(distinct frequencies 1, 2, ... k already need k (k + 1) / 2 tokens), so 100,000 rows would need 5 * 10^9
tokens. Measured: 1.6 s for the exact statistics of 100,000 rows."""
MAX_TOKENS = 10**11
"""Largest corpus size, sum of m V_m, accepted from a spectrum or a bundle: predictions reach 10^12 tokens
(``MAX_PREDICTION_TOKENS``), ten times this."""
MAX_GROWTH_POINTS = 10_000
"""Most points of a bundle's text-order growth curve (a counted text has at most 301)."""
MAX_SOURCES = 1_000
"""Most file names a bundle may list (an upload takes at most 1,000 files)."""
MAX_ORIGIN_DEPTH = 16
"""A bundle of a bundle records its origin inside its own: at most this many levels."""
MAX_BUNDLE_BYTES = 4 << 30
"""A gzip-compressed bundle may unpack to at most this many bytes."""

_INTEGER = re.compile(r"\+?[0-9]+")
_DECLARED = re.compile(r"#\s*(tokens|types)\s*[:=]\s*([0-9]+)\s*$", re.IGNORECASE)


class CountsInputError(ValueError):
    """A counts, spectrum or bundle file that cannot become a corpus; the message says where and why."""


@dataclass(frozen=True)
class ParsedSpectrum:
    """Spectrum pairs (m ascending, V_m > 0) with the totals a file declared (None when not declared)."""

    pairs: list[tuple[int, int]]
    declared_tokens: int | None = None
    declared_types: int | None = None


# ------------------------------------------------------------------------------------------- reading


def _open_text(path: Path, name: str) -> io.TextIOWrapper:
    with path.open("rb") as raw:
        sample = raw.read(SAMPLE_BYTES + 1)
    try:
        encoding = detect_encoding(sample[:SAMPLE_BYTES], complete=len(sample) <= SAMPLE_BYTES)
    except ValueError as exc:
        raise CountsInputError(f"{name}: {exc}") from exc
    return io.TextIOWrapper(path.open("rb"), encoding=encoding.codec, errors=encoding.errors, newline="")


def _delimiter(line: str) -> str | None:
    """The delimiter of a table from its first data line: tab, comma, semicolon, else blanks (None)."""
    for candidate in ("\t", ",", ";"):
        if candidate in line:
            return candidate
    return None


def _rows(path: Path, name: str, comments: bool) -> Iterator[tuple[int, list[str]]]:
    """(line number, cells) of every non-blank line; ``comments``: lines starting with '#' are yielded with
    the single cell being the whole line."""
    with _open_text(path, name) as handle:
        lines = enumerate(handle, start=1)
        delimiter: str | None = ""
        for number, line in lines:
            stripped = line.strip().lstrip("\ufeff")
            if not stripped:
                continue
            if comments and stripped.startswith("#"):
                yield number, [stripped]
                continue
            if delimiter == "":
                delimiter = _delimiter(stripped)
            if delimiter is None:
                cells = stripped.split()
            else:
                cells = next(csv.reader([stripped], delimiter=delimiter))
            while cells and not cells[-1].strip():
                cells.pop()
            yield number, [c.strip() for c in cells]


def _integer(text: str) -> int | None:
    return int(text) if _INTEGER.fullmatch(text) else None


def _where(name: str, number: int) -> str:
    return f"{name}, line {number}"


def read_word_counts(
    files: list[tuple[Path, str]],
    profile: TokenizationProfile,
    counts: dict[str, int] | None = None,
    texts: dict[str, dict[str, int]] | None = None,
) -> dict[str, int]:
    """Word -> count from ``word, count`` tables (path, name shown), words normalised with ``profile``.

    Counts of the same normalised word (within and across files) are added. Tables of rows ``text, word,
    count`` (every file with a text column, or none) also fill ``texts``: text name -> word -> count, the
    texts in order of first appearance."""
    normalize = profile.tokenizer().normalize
    counts = {} if counts is None else counts
    columns = None
    for path, name in files:
        rows, first = 0, True
        for number, cells in _rows(path, name, comments=False):
            columns = columns or (3 if len(cells) == 3 and texts is not None else 2)
            if len(cells) != columns:
                expected = "three columns, a text, a word" if columns == 3 else "two columns, a word"
                raise CountsInputError(
                    f"{_where(name, number)}: expected {expected} and its count, found {len(cells)}"
                )
            # A header row ("word, count" or "text, word, count"): only as the first row, without digits.
            header = not any(ch.isdigit() for ch in (cells[-1] if columns == 2 else "".join(cells)))
            text_name = cells.pop(0) if columns == 3 else None
            raw_word, raw_count = cells
            count = _integer(raw_count)
            if first and header:
                first = False
                continue
            first = False
            if count is None:
                what = "negative" if raw_count.startswith("-") else "not a whole number"
                columns_note = (
                    " (expected two columns, a word and its count, or three, a text, a word and its count)"
                    if columns == 3
                    else ""
                )
                raise CountsInputError(
                    f"{_where(name, number)}: the count {raw_count!r} is {what}; a count is a positive "
                    f"integer{columns_note}"
                )
            if count < 1 or count > MAX_FREQUENCY:
                raise CountsInputError(
                    f"{_where(name, number)}: the count {count:,} is outside 1 .. {MAX_FREQUENCY:,}"
                )
            word = normalize(raw_word).strip()
            check_word(word, _where(name, number), raw_word)
            total = counts.get(word, 0) + count
            if total > MAX_FREQUENCY:
                raise CountsInputError(
                    f"{_where(name, number)}: the counts of {word[:50]!r} add up to {total:,}, more than "
                    f"{MAX_FREQUENCY:,}"
                )
            counts[word] = total
            if text_name is not None:
                try:
                    text_name = clean_name(text_name, f"{_where(name, number)}: the text name", MAX_TEXT_NAME)
                except ValueError as exc:
                    raise CountsInputError(str(exc)) from exc
                of_text = texts.setdefault(text_name or "(no name)", {})
                of_text[word] = of_text.get(word, 0) + count
            if len(counts) > MAX_TYPES:
                raise CountsInputError(
                    f"{_where(name, number)}: more than {MAX_TYPES:,} different words; this program accepts "
                    "at most that many types"
                )
            rows += 1
        if not rows:
            raise CountsInputError(f"{name}: no word counts found")
    return counts


def read_spectrum(files: list[tuple[Path, str]]) -> ParsedSpectrum:
    """The spectrum of ``frequency, types`` tables; the files of one corpus are added row by row
    (a frequency given twice in one file is refused)."""
    total: dict[int, int] = {}
    declared: dict[str, int] = {}
    for path, name in files:
        seen: dict[int, int] = {}
        first = True
        for number, cells in _rows(path, name, comments=True):
            if len(cells) == 1 and cells[0].startswith("#"):
                match = _DECLARED.fullmatch(cells[0])
                if match:
                    key, value = match.group(1).lower(), int(match.group(2))
                    declared[key] = declared.get(key, 0) + value
                continue
            if len(cells) != 2:
                raise CountsInputError(
                    f"{_where(name, number)}: expected two columns, a frequency m and the number of types "
                    f"V_m occurring m times, found {len(cells)}"
                )
            m, vm = _integer(cells[0]), _integer(cells[1])
            if first and not any(ch.isdigit() for ch in cells[0] + cells[1]):
                first = False  # a header row ("m, V_m"): only as the first row
                continue
            first = False
            if m is None or vm is None:
                bad = cells[0] if m is None else cells[1]
                raise CountsInputError(
                    f"{_where(name, number)}: {bad!r} is not a whole number >= 0; a spectrum row is a "
                    "frequency m >= 1 and a number of types V_m >= 0"
                )
            if m < 1 or m > MAX_FREQUENCY:
                raise CountsInputError(
                    f"{_where(name, number)}: the frequency {m:,} is outside 1 .. {MAX_FREQUENCY:,}, the "
                    "largest frequency this program accepts"
                )
            if vm > MAX_TYPES:
                raise CountsInputError(
                    f"{_where(name, number)}: {vm:,} types is more than the {MAX_TYPES:,} this program accepts"
                )
            if m in seen:
                raise CountsInputError(
                    f"{_where(name, number)}: frequency {m} given twice (first on line {seen[m]})"
                )
            seen[m] = number
            if len(seen) > MAX_SPECTRUM_ROWS:
                raise CountsInputError(
                    f"{_where(name, number)}: more than {MAX_SPECTRUM_ROWS:,} spectrum rows (distinct "
                    "frequencies); this program accepts at most that many"
                )
            if vm:
                total[m] = total.get(m, 0) + vm
        if not seen:
            raise CountsInputError(f"{name}: no spectrum rows found")
    pairs = sorted(total.items())
    check_spectrum(pairs, declared.get("tokens"), declared.get("types"), "spectrum")
    return ParsedSpectrum(pairs, declared.get("tokens"), declared.get("types"))


def check_word(word: str, where: str, shown: str | None = None) -> None:
    """The rule every stored word follows, whatever it came from: not empty, at most ``MAX_WORD_CHARS``
    characters (the tokenizer's own limit) and no control or format characters (NUL, escape, the
    bidirectional overrides...); ``shown`` is the word as the file wrote it."""
    if not word or len(word) > MAX_WORD_CHARS or any(not ch.isprintable() for ch in word):
        raise CountsInputError(
            f"{where}: {(word if shown is None else shown)[:50]!r} is not a word (empty, longer than "
            f"{MAX_WORD_CHARS} characters or with control characters)"
        )


def check_spectrum(
    pairs: list[tuple[int, int]], tokens: int | None, types: int | None, what: str
) -> tuple[int, int]:
    """(N, V) of spectrum pairs (m ascending), checked: some types, at most ``MAX_SPECTRUM_ROWS`` rows, the
    largest m at most ``MAX_FREQUENCY``, V at most ``MAX_TYPES``, N at most ``MAX_TOKENS``, and equal to
    the declared totals when given. These bound the cost of everything computed from a spectrum."""
    if len(pairs) > MAX_SPECTRUM_ROWS:
        raise CountsInputError(
            f"{what}: {len(pairs):,} rows (distinct frequencies), more than the {MAX_SPECTRUM_ROWS:,} this "
            "program accepts"
        )
    if pairs and pairs[-1][0] > MAX_FREQUENCY:
        raise CountsInputError(
            f"{what}: the largest frequency {pairs[-1][0]:,} is more than the {MAX_FREQUENCY:,} this program "
            "accepts"
        )
    n = sum(m * v for m, v in pairs)
    v = sum(count for _, count in pairs)
    if not pairs or n == 0:
        raise CountsInputError(f"{what}: no types at all (every V_m is 0)")
    if v > MAX_TYPES:
        raise CountsInputError(f"{what}: {v:,} types, more than the {MAX_TYPES:,} this program accepts")
    if n > MAX_TOKENS:
        raise CountsInputError(
            f"{what}: sum of m V_m is {n:,} tokens, more than the {MAX_TOKENS:,} this program accepts"
        )
    if tokens is not None and tokens != n:
        raise CountsInputError(
            f"{what}: the declared {tokens:,} tokens disagree with the rows, whose sum of m V_m is {n:,}"
        )
    if types is not None and types != v:
        raise CountsInputError(
            f"{what}: the declared {types:,} types disagree with the rows, whose sum of V_m is {v:,}"
        )
    return n, v


def spectrum_of_counts(counts: dict[str, int]) -> list[tuple[int, int]]:
    """V_m pairs (m ascending) of a word -> count map."""
    spectrum: dict[int, int] = {}
    for count in counts.values():
        spectrum[count] = spectrum.get(count, 0) + 1
    return sorted(spectrum.items())


def data_hash(kind: str, data: Any) -> str:
    """SHA-256 of the canonical JSON of what a counts or spectrum corpus was made from (its content hash)."""
    return hashlib.sha256(_canonical({"kind": kind, "data": data})).hexdigest()


# -------------------------------------------------------------------------------------------- bundles


def _canonical(value: Any) -> bytes:
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False).encode("utf-8")


def bundle_checksum(document: dict[str, Any]) -> str:
    """SHA-256 (hex) of the canonical JSON of every field of the bundle but ``checksum``."""
    return hashlib.sha256(_canonical({k: v for k, v in document.items() if k != "checksum"})).hexdigest()


def encode_bundle(document: dict[str, Any], compress: bool = True) -> bytes:
    """The bundle file: ``document`` (format, version, corpus...) with its checksum, as (gzip) JSON."""
    document = dict(document) | {"format": BUNDLE_FORMAT, "format_version": BUNDLE_VERSION}
    document["checksum"] = {"algorithm": "sha256", "value": bundle_checksum(document)}
    data = json.dumps(document, ensure_ascii=False, separators=(",", ":")).encode("utf-8")
    return gzip.compress(data, mtime=0) if compress else data


def _gunzip(data: bytes, name: str) -> bytes:
    inflater = zlib.decompressobj(wbits=31)
    try:
        out = inflater.decompress(data, MAX_BUNDLE_BYTES)
    except zlib.error as exc:
        raise CountsInputError(f"{name}: damaged gzip data ({exc})") from exc
    if inflater.unconsumed_tail:
        raise CountsInputError(f"{name}: unpacks to more than {MAX_BUNDLE_BYTES >> 30} GB")
    if not inflater.eof:
        raise CountsInputError(f"{name}: the gzip data is cut short")
    return out


BUNDLE_FIELDS = frozenset(
    {"format", "format_version", "program_version", "exported_at", "corpus", "checksum"}
)
CORPUS_FIELDS = frozenset(
    {
        "name", "labels", "profile", "source_kind", "origin", "sources", "content_hash", "program_version",
        "created_at", "tokens", "types", "hapaxes", "counts", "spectrum", "growth", "prefix_spectra",
        "text_order", "texts",
    }
)  # fmt: skip
ORIGIN_FIELDS = frozenset(
    {"source_kind", "name", "exported_by", "exported_at", "created_at", "origin", "file"}
)
TEXTS_FIELDS = frozenset({"separator", "empty_skipped", "list"})
TEXT_FIELDS = frozenset({"name", "tokens", "ranks", "counts"})
MAX_BUNDLE_TEXTS = 1_000_000
"""Most texts in a bundle (each at least one token)."""
TEXT_NAME_CHARS = 300
TEXT_SEPARATOR_CHARS = 100
TEXT_ORDER_FIELDS = frozenset({"measured_tokens", "mattr", "mtld", "segments"})
SEGMENT_FIELDS = frozenset({"size", "mean", "sd", "segments"})
MAX_SEGMENT_SIZES = 100
"""Most segment sizes of a bundle's text-order spread (a counted text has at most 24)."""
MAX_VERSION_CHARS = 64
_SHA256 = re.compile(r"[0-9a-f]{64}")


def _refuse(field_name: str, problem: str) -> CountsInputError:
    return CountsInputError(f"bundle: {field_name} {problem}")


def _known_keys(value: dict[str, Any], known: frozenset[str], where: str) -> None:
    unknown = sorted(str(k) for k in set(value) - known)
    if unknown:
        raise CountsInputError(
            f"bundle: unknown field {where}{unknown[0]!r}"
            + (f" (and {len(unknown) - 1:,} more)" if len(unknown) > 1 else "")
            + f"; known fields here: {', '.join(sorted(known))}"
        )


def _integer_field(value: Any, field_name: str, low: int, high: int) -> int:
    if type(value) is not int or not low <= value <= high:
        raise _refuse(field_name, f"must be an integer from {low:,} to {high:,}")
    return value


def _number_field(value: Any, field_name: str, low: float, high: float) -> float | None:
    """A measured number (or null), finite and within [low, high]."""
    if value is None:
        return None
    if type(value) not in (int, float) or not math.isfinite(value) or not low <= value <= high:
        raise _refuse(field_name, f"must be a number from {low:,} to {high:,} or null")
    return float(value)


def _text_field(value: Any, field_name: str, max_chars: int) -> str:
    """A short line of text (a version, a time, a name) under the rules of every name (``clean_name``)."""
    if not isinstance(value, str):
        raise _refuse(field_name, "must be a string")
    try:
        return clean_name(value, f"bundle: {field_name}", max_chars)
    except ValueError as exc:
        raise CountsInputError(str(exc)) from exc


def _time_field(value: Any, field_name: str) -> str:
    text = _text_field(value, field_name, 40)
    try:
        datetime.fromisoformat(text)
    except ValueError as exc:
        raise _refuse(field_name, "must be a time in ISO 8601 form") from exc
    return text


def _pairs(value: Any, field_name: str, first_min: int, max_rows: int) -> list[tuple[int, int]]:
    """[[a, b], ...] of integers, a strictly ascending from ``first_min``, b >= 1, at most ``max_rows``."""
    if not isinstance(value, list):
        raise _refuse(field_name, "must be a list of [integer, integer] pairs")
    if len(value) > max_rows:
        raise _refuse(field_name, f"has {len(value):,} rows, more than the {max_rows:,} this program accepts")
    if not all(
        isinstance(p, list) and len(p) == 2 and type(p[0]) is int and type(p[1]) is int for p in value
    ):
        raise _refuse(field_name, "must be a list of [integer, integer] pairs")
    pairs = [(a, b) for a, b in value]
    if any(a < first_min or b < 1 for a, b in pairs) or any(
        x[0] >= y[0] for x, y in zip(pairs, pairs[1:], strict=False)
    ):
        raise _refuse(
            field_name,
            f"must be in strictly ascending order of its first numbers (from {first_min}), each "
            "second number at least 1",
        )
    return pairs


def _counts(value: Any, spectrum: list[tuple[int, int]]) -> dict[str, int]:
    """The word counts of a bundle: [word, count] rows in code-point order of the words, each word under
    the rule of every stored word (``check_word``), whose spectrum is the bundle's spectrum."""
    if not isinstance(value, list):
        raise _refuse("corpus.counts", "must be a list of [word, count] pairs or null")
    if len(value) > MAX_TYPES:
        raise _refuse("corpus.counts", f"has {len(value):,} words, more than the {MAX_TYPES:,} accepted")
    counts: dict[str, int] = {}
    previous = None
    for index, row in enumerate(value):
        where = f"bundle: corpus.counts[{index}]"
        if not (isinstance(row, list) and len(row) == 2 and isinstance(row[0], str) and type(row[1]) is int):
            raise CountsInputError(f"{where} must be a [word, count] pair")
        word, count = row
        check_word(word, where)
        if not 1 <= count <= MAX_FREQUENCY:
            raise CountsInputError(f"{where}: the count {count:,} is outside 1 .. {MAX_FREQUENCY:,}")
        if previous is not None and word <= previous:
            raise CountsInputError(f"{where}: the words must be unique and in code-point order")
        counts[word] = count
        previous = word
    if spectrum_of_counts(counts) != spectrum:
        raise CountsInputError("bundle: corpus.counts disagree with corpus.spectrum")
    return counts


def _growth(value: Any, tokens: int, types: int) -> list[tuple[int, int]]:
    """The exact text-order growth curve: tokens strictly rising from 1, 1 <= V(n) <= n, V never falling
    and rising by at most the tokens added (each token adds at most one type), ending at (N, V)."""
    growth = _pairs(value, "corpus.growth", 1, MAX_GROWTH_POINTS)
    previous = (0, 0)
    for index, (n, v) in enumerate(growth):
        if not 1 <= v <= n or v < previous[1] or v - previous[1] > n - previous[0]:
            raise _refuse(
                f"corpus.growth[{index}]",
                f"({n:,} tokens, {v:,} types) is impossible after ({previous[0]:,}, {previous[1]:,}): types "
                "never fall, never exceed tokens and rise by at most one per token",
            )
        previous = (n, v)
    if not growth or growth[-1] != (tokens, types):
        raise _refuse("corpus.growth", f"must end at the corpus's {tokens:,} tokens and {types:,} types")
    return growth


def _prefix_spectra(
    value: Any, tokens: int, types: int, largest: int, growth: list[tuple[int, int]]
) -> dict[str, tuple[int, list[tuple[int, int]]]]:
    """Spectra of the first shares of the text: known shares only, round(share N) tokens each, no more types
    than the corpus and no larger frequency, and the types the growth curve has at that size."""
    if not isinstance(value, dict):
        raise _refuse("corpus.prefix_spectra", "must be an object or null")
    at = dict(growth)
    prefixes: dict[str, tuple[int, list[tuple[int, int]]]] = {}
    for share, entry in value.items():
        where = f"corpus.prefix_spectra[{share!r}]"
        if share not in PREFIX_FRACTIONS:
            raise CountsInputError(
                f"bundle: unknown field corpus.prefix_spectra[{str(share)[:50]!r}]; the shares are "
                f"{', '.join(PREFIX_FRACTIONS)}"
            )
        if not isinstance(entry, dict):
            raise _refuse(where, "must be an object with tokens and spectrum")
        _known_keys(entry, frozenset({"tokens", "spectrum"}), f"{where}.")
        size = prefix_length(share, tokens)
        n = _integer_field(entry.get("tokens"), f"{where}.tokens", size, size)
        pairs = _pairs(entry.get("spectrum"), f"{where}.spectrum", 1, MAX_SPECTRUM_ROWS)
        _, v = check_spectrum(pairs, n, None, f"bundle: {where}.spectrum")
        if v > types or pairs[-1][0] > largest or at.get(n, v) != v:
            raise _refuse(where, "disagrees with the corpus's spectrum or growth curve")
        prefixes[share] = (n, pairs)
    return prefixes


def check_text_order(value: Any, tokens: int) -> dict[str, Any]:
    """Text-order statistics of a corpus of ``tokens`` tokens, as a bundle carries them and the store keeps
    them: MATTR (a share, 0..1), MTLD (a length in tokens) and the segment spreads, with known keys only."""
    if not isinstance(value, dict):
        raise _refuse("corpus.text_order", "must be an object or null")
    _known_keys(value, TEXT_ORDER_FIELDS, "corpus.text_order.")
    measured = _integer_field(value.get("measured_tokens", 0), "corpus.text_order.measured_tokens", 0, tokens)
    segments = value.get("segments", [])
    if not isinstance(segments, list) or len(segments) > MAX_SEGMENT_SIZES:
        raise _refuse("corpus.text_order.segments", f"must be a list of at most {MAX_SEGMENT_SIZES} objects")
    checked = []
    for where, segment in _objects(segments, "corpus.text_order.segments", SEGMENT_FIELDS):
        size = _integer_field(segment.get("size"), f"{where}.size", 1, max(measured, 1))
        checked.append(
            {
                "size": size,
                "mean": _number_field(segment.get("mean"), f"{where}.mean", 0, size),
                "sd": _number_field(segment.get("sd"), f"{where}.sd", 0, size),
                "segments": _integer_field(segment.get("segments"), f"{where}.segments", 1, max(measured, 1)),
            }
        )
    return {
        "measured_tokens": measured,
        "mattr": _number_field(value.get("mattr"), "corpus.text_order.mattr", 0, 1),
        "mtld": _number_field(value.get("mtld"), "corpus.text_order.mtld", 0, MAX_TOKENS),
        "segments": checked,
    }


def _origin(value: Any, where: str = "corpus.origin", depth: int = 0) -> dict[str, Any] | None:
    """Where a corpus that came from a bundle came from (known keys, short clean strings, bounded depth)."""
    if value is None:
        return None
    if not isinstance(value, dict):
        raise _refuse(where, "must be an object or null")
    if depth >= MAX_ORIGIN_DEPTH:
        raise _refuse(where, f"nests more than {MAX_ORIGIN_DEPTH} bundles")
    _known_keys(value, ORIGIN_FIELDS, f"{where}.")
    out: dict[str, Any] = {}
    for key, item in value.items():
        if key == "origin":
            out[key] = _origin(item, f"{where}.origin", depth + 1)
        elif key == "source_kind" and item not in (TEXT, WORD_COUNTS, SPECTRUM):
            raise _refuse(f"{where}.source_kind", f"must be one of {TEXT}, {WORD_COUNTS}, {SPECTRUM}")
        else:
            out[key] = _text_field(item, f"{where}.{key}", 200)
    return out


@dataclass
class BundleCorpus:
    """A corpus as read from a checked bundle (the fields of ``CorpusRecord`` plus its origin). ``name``,
    ``labels``, ``profile`` and ``sources`` are checked for their types here and for the rules of names,
    labels and profiles by the service that stores them (``app.services.exchange``)."""

    name: str
    labels: dict[str, str]
    profile: dict[str, Any]
    source_kind: str
    sources: list[str]
    content_hash: str
    program_version: str
    tokens: int
    types: int
    hapaxes: int
    counts: dict[str, int]
    spectrum: list[tuple[int, int]]
    growth: list[tuple[int, int]]
    prefix_spectra: dict[str, tuple[int, list[tuple[int, int]]]] = field(default_factory=dict)
    text_order: dict[str, Any] = field(default_factory=dict)
    origin: dict[str, Any] = field(default_factory=dict)
    texts: list[TextCounts] = field(default_factory=list)
    texts_info: dict[str, Any] | None = None
    """How the texts were found (``separator``, ``texts``, ``empty_skipped``), None without texts."""


def decode_bundle(data: bytes, name: str = "bundle") -> BundleCorpus:
    """Read and check a bundle: format, version and checksum (against damage: anyone can recompute it), then
    every field for its type, range and agreement with the others, known fields only."""
    if data[:2] == b"\x1f\x8b":
        data = _gunzip(data, name)
    try:
        document = json.loads(data.decode("utf-8-sig"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise CountsInputError(f"{name}: not a corpus bundle (not JSON: {exc})") from exc
    except RecursionError as exc:
        raise CountsInputError(f"{name}: not a corpus bundle (nested too deeply)") from exc
    if not isinstance(document, dict) or document.get("format") != BUNDLE_FORMAT:
        raise CountsInputError(f'{name}: not a corpus bundle (no "format": "{BUNDLE_FORMAT}")')
    version = document.get("format_version")
    if type(version) is not int or version < 1:
        raise CountsInputError(f"{name}: the bundle has no valid format_version")
    if version > BUNDLE_VERSION:
        raise CountsInputError(
            f"{name}: the bundle has format version {version}, made by a newer Lexigrowth; this one reads "
            f"versions up to {BUNDLE_VERSION}. Export it again from the newer version's corpus or upgrade."
        )
    checksum = document.get("checksum")
    if not isinstance(checksum, dict) or checksum.get("algorithm") != "sha256":
        raise CountsInputError(f"{name}: the bundle has no sha256 checksum")
    if checksum.get("value") != bundle_checksum(document):
        raise CountsInputError(
            f"{name}: the checksum does not match the content: the file was changed or damaged after export"
        )
    _known_keys(document, BUNDLE_FIELDS, "")
    corpus = document.get("corpus")
    if not isinstance(corpus, dict):
        raise CountsInputError(f"{name}: the bundle has no corpus")
    return _bundle_corpus(corpus, document)


def _bundle_corpus(corpus: dict[str, Any], document: dict[str, Any]) -> BundleCorpus:
    _known_keys(corpus, CORPUS_FIELDS, "corpus.")
    kind = corpus.get("source_kind")
    if kind not in (TEXT, WORD_COUNTS, SPECTRUM):
        raise _refuse("corpus.source_kind", f"must be one of {TEXT}, {WORD_COUNTS}, {SPECTRUM}")
    spectrum = _pairs(corpus.get("spectrum"), "corpus.spectrum", 1, MAX_SPECTRUM_ROWS)
    tokens, types = check_spectrum(
        spectrum,
        _integer_field(corpus.get("tokens"), "corpus.tokens", 1, MAX_TOKENS),
        _integer_field(corpus.get("types"), "corpus.types", 1, MAX_TYPES),
        "bundle: corpus.spectrum",
    )
    hapaxes = dict(spectrum).get(1, 0)
    _integer_field(corpus.get("hapaxes"), "corpus.hapaxes", hapaxes, hapaxes)
    counts: dict[str, int] = {}
    if kind == SPECTRUM:
        if corpus.get("counts") is not None:
            raise _refuse("corpus.counts", "must be null: a corpus made from a spectrum has no word counts")
    else:
        counts = _counts(corpus.get("counts"), spectrum)
    growth: list[tuple[int, int]] = []
    prefixes: dict[str, tuple[int, list[tuple[int, int]]]] = {}
    text_order: dict[str, Any] = {}
    if kind == TEXT:
        growth = _growth(corpus.get("growth"), tokens, types)
        prefixes = _prefix_spectra(corpus.get("prefix_spectra") or {}, tokens, types, spectrum[-1][0], growth)
        text_order = check_text_order(corpus.get("text_order") or {}, tokens)
    else:
        for key in ("growth", "prefix_spectra", "text_order"):
            if corpus.get(key):
                raise _refuse(f"corpus.{key}", f"must be null: a corpus made from {kind} has no text order")
    claimed = corpus.get("content_hash")
    if not isinstance(claimed, str) or not _SHA256.fullmatch(claimed):
        raise _refuse("corpus.content_hash", "must be a SHA-256 in 64 lowercase hexadecimal digits")
    if kind == TEXT:
        # The text is not in the bundle: its hash cannot be checked, so the corpus is known by its numbers.
        content_hash = data_hash(
            TEXT,
            {
                "counts": sorted(counts.items()),
                "growth": growth,
                "prefix_spectra": {share: [n, pairs] for share, (n, pairs) in prefixes.items()},
                "text_order": text_order,
            },
        )
    else:
        content_hash = data_hash(kind, sorted(counts.items()) if kind == WORD_COUNTS else spectrum)
        if claimed != content_hash:
            raise _refuse("corpus.content_hash", f"does not match the {kind} it carries")
    labels = corpus.get("labels") or {}
    if not isinstance(labels, dict) or not all(isinstance(v, str) for v in labels.values()):
        raise _refuse("corpus.labels", "must be an object of text values")
    profile = corpus.get("profile")
    if not isinstance(profile, dict):
        raise _refuse("corpus.profile", "must be an object")
    sources = corpus.get("sources") or []
    if not isinstance(sources, list) or not all(isinstance(s, str) for s in sources):
        raise _refuse("corpus.sources", "must be a list of file names")
    if len(sources) > MAX_SOURCES:
        raise _refuse(
            "corpus.sources", f"lists {len(sources):,} files, more than the {MAX_SOURCES:,} accepted"
        )
    name = corpus.get("name")
    if not isinstance(name, str):
        raise _refuse("corpus.name", "must be a string")
    origin = {
        "source_kind": kind,
        "name": name,
        "exported_by": _text_field(document.get("program_version", ""), "program_version", MAX_VERSION_CHARS),
        "exported_at": _time_field(document.get("exported_at"), "exported_at"),
        "created_at": _time_field(corpus.get("created_at"), "corpus.created_at"),
        "origin": _origin(corpus.get("origin")),
    }
    return BundleCorpus(
        name=name,
        labels=labels,
        profile=profile,
        source_kind=kind,
        sources=sources,
        content_hash=content_hash,
        program_version=_text_field(
            corpus.get("program_version"), "corpus.program_version", MAX_VERSION_CHARS
        ),
        tokens=tokens,
        types=types,
        hapaxes=hapaxes,
        counts=counts,
        spectrum=spectrum,
        growth=growth,
        prefix_spectra=prefixes,
        text_order=text_order,
        origin=origin,
        **_bundle_texts(corpus.get("texts"), counts, kind),
    )


def _bundle_texts(value: Any, counts: dict[str, int], kind: str) -> dict[str, Any]:
    """``texts`` and ``texts_info`` of a bundle's ``corpus.texts`` (null: none): every text's name, tokens
    and word counts by rank in the code-point order of ``counts``; the texts add up to the corpus's counts."""
    if value is None:
        return {}
    where = "corpus.texts"
    if kind == SPECTRUM:
        raise _refuse(where, "must be null: a corpus made from a spectrum has no texts")
    if not isinstance(value, dict):
        raise _refuse(where, "must be an object or null")
    _known_keys(value, TEXTS_FIELDS, f"{where}.")
    separator = _text_field(value.get("separator"), f"{where}.separator", TEXT_SEPARATOR_CHARS)
    empty = _integer_field(value.get("empty_skipped", 0), f"{where}.empty_skipped", 0, MAX_BUNDLE_TEXTS)
    listed = value.get("list")
    if not isinstance(listed, list) or not 1 <= len(listed) <= MAX_BUNDLE_TEXTS:
        raise _refuse(f"{where}.list", f"must be a list of 1 to {MAX_BUNDLE_TEXTS:,} texts")
    types = len(counts)
    totals = np.zeros(types, dtype=np.int64)
    texts = []
    for at, item in _objects(listed, f"{where}.list", TEXT_FIELDS):
        name = _text_field(item.get("name"), f"{at}.name", TEXT_NAME_CHARS)
        ranks, text_counts = (_integer_list(item.get(key), f"{at}.{key}") for key in ("ranks", "counts"))
        if ranks.size != text_counts.size or ranks.size == 0:
            raise _refuse(at, "must give as many ranks as counts, at least one")
        if ranks[0] < 0 or ranks[-1] >= types or (np.diff(ranks) <= 0).any():
            raise _refuse(f"{at}.ranks", f"must rise strictly within 0 .. {types - 1:,} (the corpus's words)")
        if (text_counts < 1).any():
            raise _refuse(f"{at}.counts", "must all be at least 1")
        tokens = _integer_field(item.get("tokens"), f"{at}.tokens", 1, MAX_TOKENS)
        if tokens != int(text_counts.sum()):
            raise _refuse(
                f"{at}.tokens", f"is {tokens:,}, but its counts add up to {int(text_counts.sum()):,}"
            )
        totals[ranks] += text_counts
        texts.append(TextCounts(name, tokens, ranks, text_counts))
    expected = np.array([counts[w] for w in sorted(counts)], dtype=np.int64)
    differing = np.flatnonzero(totals != expected)
    if differing.size:
        rank = int(differing[0])
        raise _refuse(
            f"{where}.list",
            f"does not add up to the corpus: word {rank:,} in code-point order occurs {int(totals[rank]):,} "
            f"times in the texts and {int(expected[rank]):,} times in corpus.counts",
        )
    info = {"separator": separator, "texts": len(texts), "empty_skipped": empty}
    return {"texts": texts, "texts_info": info}


def _objects(items: list[Any], where: str, fields: frozenset[str]) -> Iterator[tuple[str, dict[str, Any]]]:
    """Each item of a bundle's list with its place (``where[i]``), refused unless an object of known fields."""
    for index, item in enumerate(items):
        at = f"{where}[{index}]"
        if not isinstance(item, dict):
            raise _refuse(at, "must be an object")
        _known_keys(item, fields, f"{at}.")
        yield at, item


def _integer_list(value: Any, field_name: str) -> np.ndarray:
    if not isinstance(value, list) or not all(type(v) is int for v in value):
        raise _refuse(field_name, "must be a list of integers")
    try:
        return np.array(value, dtype=np.int64)
    except OverflowError as exc:
        raise _refuse(field_name, "holds an integer too large for a count") from exc


def read_bundle(path: Path, name: str) -> BundleCorpus:
    return decode_bundle(path.read_bytes(), name)
