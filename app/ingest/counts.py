"""Corpora that arrive as numbers instead of text: word-count lists, frequency spectra and corpus bundles.

- **Word counts**: CSV/TSV rows ``word, count`` (a header row is optional; the delimiter -- tab, comma,
  semicolon or blanks -- and the encoding are detected). Each word is normalised with the chosen profile's
  Unicode normalisation and case folding (``Tokenizer.normalize``), so the counts compare with texts counted
  under that profile, and counts of the same normalised word are added up.
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
import re
import zlib
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from app.ingest.encoding import SAMPLE_BYTES, detect_encoding
from app.ingest.profiles import TokenizationProfile

WORD_COUNTS = "word-counts"
SPECTRUM = "spectrum"
BUNDLE = "bundle"
TEXT = "text"
SOURCE_KINDS = (TEXT, WORD_COUNTS, SPECTRUM, BUNDLE)

BUNDLE_FORMAT = "lexigrowth-corpus-bundle"
BUNDLE_VERSION = 1
"""The bundle format version this program writes and the newest it reads."""

MAX_COUNT = 10**13
"""Largest count, frequency or number of types accepted from a file (10 trillion: far beyond any corpus)."""
MAX_TOKENS = 10**13
"""Largest corpus size, sum of m V_m, accepted from a spectrum or a bundle."""
MAX_WORD_CHARS = 1000
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
    files: list[tuple[Path, str]], profile: TokenizationProfile, counts: dict[str, int] | None = None
) -> dict[str, int]:
    """Word -> count from ``word, count`` tables (path, name shown), words normalised with ``profile``.

    Counts of the same normalised word (within and across files) are added."""
    normalize = profile.tokenizer().normalize
    counts = {} if counts is None else counts
    for path, name in files:
        rows, first = 0, True
        for number, cells in _rows(path, name, comments=False):
            if len(cells) != 2:
                raise CountsInputError(
                    f"{_where(name, number)}: expected two columns, a word and its count, found {len(cells)}"
                )
            raw_word, raw_count = cells
            count = _integer(raw_count)
            if first and not any(ch.isdigit() for ch in raw_count):
                first = False  # a header row ("word, count"): only as the first row
                continue
            first = False
            if count is None:
                what = "negative" if raw_count.startswith("-") else "not a whole number"
                raise CountsInputError(
                    f"{_where(name, number)}: the count {raw_count!r} is {what}; a count is a positive integer"
                )
            if count < 1 or count > MAX_COUNT:
                raise CountsInputError(
                    f"{_where(name, number)}: the count {count} is outside 1 .. {MAX_COUNT:,}"
                )
            word = normalize(raw_word).strip()
            if not word or len(word) > MAX_WORD_CHARS or any(not ch.isprintable() for ch in word):
                raise CountsInputError(
                    f"{_where(name, number)}: {raw_word[:50]!r} is not a word (empty, too long or with "
                    "control characters)"
                )
            counts[word] = counts.get(word, 0) + count
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
            if m < 1 or m > MAX_COUNT or vm > MAX_COUNT:
                raise CountsInputError(
                    f"{_where(name, number)}: frequency {m} or number of types {vm} is outside the "
                    f"possible range (1 .. {MAX_COUNT:,})"
                )
            if m in seen:
                raise CountsInputError(
                    f"{_where(name, number)}: frequency {m} given twice (first on line {seen[m]})"
                )
            seen[m] = number
            if vm:
                total[m] = total.get(m, 0) + vm
        if not seen:
            raise CountsInputError(f"{name}: no spectrum rows found")
    pairs = sorted(total.items())
    check_spectrum(pairs, declared.get("tokens"), declared.get("types"), "spectrum")
    return ParsedSpectrum(pairs, declared.get("tokens"), declared.get("types"))


def check_spectrum(
    pairs: list[tuple[int, int]], tokens: int | None, types: int | None, what: str
) -> tuple[int, int]:
    """(N, V) of spectrum pairs, checked: some types, sum m V_m at most ``MAX_TOKENS``, and equal to the
    declared totals when given."""
    n = sum(m * v for m, v in pairs)
    v = sum(count for _, count in pairs)
    if not pairs or n == 0:
        raise CountsInputError(f"{what}: no types at all (every V_m is 0)")
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


def _pairs(value: Any, what: str, first_min: int) -> list[tuple[int, int]]:
    if not isinstance(value, list) or not all(
        isinstance(p, list) and len(p) == 2 and all(type(x) is int for x in p) for p in value
    ):
        raise CountsInputError(f"bundle: {what} must be a list of [integer, integer] pairs")
    pairs = [(int(a), int(b)) for a, b in value]
    if any(a < first_min or b < 0 for a, b in pairs) or any(
        x[0] >= y[0] for x, y in zip(pairs, pairs[1:], strict=False)
    ):
        raise CountsInputError(f"bundle: {what} must be in ascending order of positive integers")
    return pairs


@dataclass
class BundleCorpus:
    """A corpus as read from a checked bundle (the fields of ``CorpusRecord`` plus its origin)."""

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


def decode_bundle(data: bytes, name: str = "bundle") -> BundleCorpus:
    """Read and check a bundle: format, version, checksum, then that its numbers agree with each other."""
    if data[:2] == b"\x1f\x8b":
        data = _gunzip(data, name)
    try:
        document = json.loads(data.decode("utf-8-sig"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise CountsInputError(f"{name}: not a corpus bundle (not JSON: {exc})") from exc
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
    corpus = document.get("corpus")
    if not isinstance(corpus, dict):
        raise CountsInputError(f"{name}: the bundle has no corpus")
    return _bundle_corpus(corpus, document)


def _bundle_corpus(corpus: dict[str, Any], document: dict[str, Any]) -> BundleCorpus:
    def need(key: str, kind: type | tuple[type, ...]) -> Any:
        value = corpus.get(key)
        if not isinstance(value, kind) or isinstance(value, bool):
            raise CountsInputError(f"bundle: corpus field {key!r} is missing or has the wrong type")
        return value

    kind = need("source_kind", str)
    if kind not in (TEXT, WORD_COUNTS, SPECTRUM):
        raise CountsInputError(f"bundle: unknown source kind {kind!r}")
    spectrum = _pairs(need("spectrum", list), "spectrum", 1)
    tokens, types = check_spectrum(spectrum, need("tokens", int), need("types", int), "bundle")
    raw_counts = corpus.get("counts")
    counts: dict[str, int] = {}
    if raw_counts is not None:
        if not isinstance(raw_counts, list) or not all(
            isinstance(r, list) and len(r) == 2 and isinstance(r[0], str) and type(r[1]) is int and r[1] > 0
            for r in raw_counts
        ):
            raise CountsInputError("bundle: counts must be a list of [word, positive integer] pairs")
        counts = {w: c for w, c in raw_counts}
        if len(counts) != len(raw_counts) or spectrum_of_counts(counts) != spectrum:
            raise CountsInputError("bundle: the word counts disagree with the spectrum")
    elif kind != SPECTRUM:
        raise CountsInputError(f"bundle: a corpus made from {kind} needs its word counts")
    growth = _pairs(corpus.get("growth") or [], "growth", 0)
    if growth and (
        growth[-1] != (tokens, types) or any(y[1] < x[1] for x, y in zip(growth, growth[1:], strict=False))
    ):
        raise CountsInputError("bundle: the growth curve does not end at the corpus's tokens and types")
    prefixes: dict[str, tuple[int, list[tuple[int, int]]]] = {}
    raw_prefixes = corpus.get("prefix_spectra") or {}
    if not isinstance(raw_prefixes, dict):
        raise CountsInputError("bundle: prefix_spectra must be an object")
    for share, entry in raw_prefixes.items():
        if not isinstance(entry, dict) or type(entry.get("tokens")) is not int:
            raise CountsInputError("bundle: each prefix spectrum needs tokens and spectrum")
        prefixes[str(share)] = (entry["tokens"], _pairs(entry.get("spectrum"), "prefix spectrum", 1))
    text_order = corpus.get("text_order") or {}
    labels = corpus.get("labels") or {}
    if not isinstance(text_order, dict) or not isinstance(labels, dict):
        raise CountsInputError("bundle: labels and text_order must be objects")
    origin = {
        "source_kind": kind,
        "name": need("name", str),
        "exported_by": str(document.get("program_version", "")),
        "exported_at": str(document.get("exported_at", "")),
        "created_at": str(corpus.get("created_at", "")),
        "origin": corpus.get("origin") or None,
    }
    return BundleCorpus(
        name=corpus["name"],
        labels={str(k): str(v) for k, v in labels.items()},
        profile=need("profile", dict),
        source_kind=kind,
        sources=[str(s) for s in corpus.get("sources") or []],
        content_hash=str(corpus.get("content_hash", "")),
        program_version=str(corpus.get("program_version", "")),
        tokens=tokens,
        types=types,
        hapaxes=dict(spectrum).get(1, 0),
        counts=counts,
        spectrum=spectrum,
        growth=growth,
        prefix_spectra=prefixes,
        text_order=text_order,
        origin=origin,
    )


def read_bundle(path: Path, name: str) -> BundleCorpus:
    return decode_bundle(path.read_bytes(), name)
