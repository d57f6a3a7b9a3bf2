"""Streaming word counts of a corpus with bounded memory, and its exact text-order statistics.

A corpus is one or more ``TextSource`` read in order (a line break separates two sources, so no word spans
them). Each source is read in chunks; a chunk is tokenized up to its last safe cut (after whitespace, or
after punctuation or a symbol that is not followed by a combining mark), and the rest is carried over to
the next chunk, so the result never depends on where chunks end. Tokens, case folding and Unicode
normalisation cannot reach across such a cut: no token holds whitespace, punctuation (other than the
apostrophes, hyphens, points and commas it joins on) or symbols, and NFC never composes across a
character of these kinds.

The pieces (the text up to a cut) are grouped into batches of about ``BATCH_CHUNKS`` chunks, and each
batch is tokenized on its own by an engine (``app.ingest.engines``: in this process, in local worker
processes or on a Dask cluster), which numbers the batch's types in order of first occurrence. The batches are
merged here strictly in text order, so every engine gives the same result. What is kept per type is its
global id (its rank in order of first appearance, via a dict), and the position of its first occurrence
(the batch's offset plus the local position). What is kept per token is its type id, written as
little-endian int32 to a temporary file (4 bytes per token). From these, after the last batch:

- the text-order type growth V(n) is exact at every n: V(n) = #{types whose first position < n}, the
  first positions being ascending by construction (``np.searchsorted``);
- the frequencies, and the exact spectra of the first round(p N) tokens, come from ``np.bincount`` over
  slices of the id file, read block by block so that memory does not grow with the corpus;
- the id file stays available (``CountResult.type_ids()``) for other text-order statistics until
  ``CountResult.close()``.

Memory stays bounded: a few batches per worker are in flight, and what grows is one dict entry and one
first position per type.
"""

from __future__ import annotations

import hashlib
import os
import tempfile
import weakref
from collections.abc import Callable, Iterable, Iterator, Sequence
from contextlib import closing
from dataclasses import dataclass, field
from fractions import Fraction
from itertools import repeat
from pathlib import Path
from typing import BinaryIO

import numpy as np
import regex

from app.core.spectrum import Spectrum
from app.ingest import scratch, texts
from app.ingest.engines import BatchCounts, EngineName, choose_engine, count_batches
from app.ingest.profiles import TokenizationProfile
from app.ingest.readers import DEFAULT_CHUNK_CHARS, TextSource

PREFIX_FRACTIONS = ("0.1", "0.25", "0.5")
"""Shares p of the text whose exact prefix spectra (first round(p N) tokens, halves to even) are kept."""

GROWTH_LOG_POINTS = 150
GROWTH_LINEAR_POINTS = 150
TYPE_ID_DTYPE = np.dtype("<i4")
_READ_SLICE = 1 << 20
BATCH_CHUNKS = 1
"""Chunks of text per batch sent to an engine: bigger batches mean fewer types to merge here, smaller
ones less memory per worker (the native grouping holds a batch's tokens at once). With one chunk of
``DEFAULT_CHUNK_CHARS`` (2^18 characters) per batch, the local engine counted 1 GB of books in 272 MiB
for all its processes together (2^19: 315 MiB; 2^20 in pairs: 385 MiB), at a few per cent more CPU."""
_SOURCE_SEPARATOR = "\n"

# A cut is safe after a character that never belongs to a token and never composes (NFC) with what
# follows, provided the next character is not a combining mark ("<" + U+0338 composes to "≮").
_SAFE_CUT = regex.compile(r"(?rV1)[[\s\p{P}\p{S}\p{Z}\p{Cc}]--['\u2019\-\u2010\u2011.,]](?=\P{M})")

Progress = Callable[[int, int], None]


def growth_checkpoints(
    tokens: int, log_points: int = GROWTH_LOG_POINTS, linear_points: int = GROWTH_LINEAR_POINTS
) -> np.ndarray:
    """Token counts in [1, tokens] at which the growth curve is recorded: the union of ``log_points``
    log-spaced and ``linear_points`` evenly spaced integers, always including ``tokens``."""
    if tokens < 1:
        raise ValueError("a growth curve needs at least one token")
    log = np.geomspace(1, tokens, log_points)
    linear = np.linspace(tokens / linear_points, tokens, linear_points)
    points = np.unique(np.rint(np.concatenate([log, linear, [tokens]])).astype(np.int64))
    return points[(points >= 1) & (points <= tokens)]


def prefix_length(fraction: str, tokens: int) -> int:
    """round(p N) for p given as a decimal string, in exact arithmetic (halves round to even)."""
    return round(Fraction(fraction) * tokens)


@dataclass
class CountResult:
    """Word counts of a corpus and its exact text-order statistics.

    ``counts`` maps each type to its frequency in order of first appearance; the position of a type in
    that order is its type id, as stored in ``type_ids()``. ``growth`` holds (n, V(n)) at
    ``growth_checkpoints(tokens)``; ``prefix_spectra`` maps each of ``PREFIX_FRACTIONS`` to
    (round(p N), spectrum of the first round(p N) tokens). ``content_hash`` is the SHA-256 of the decoded
    text as UTF-8 (sources joined by a line break). Close the result (or use it as a context manager) to
    delete the temporary type-id file.
    """

    names: list[str]
    profile: TokenizationProfile
    counts: dict[str, int]
    tokens: int
    types: int
    growth: list[tuple[int, int]]
    prefix_spectra: dict[str, tuple[int, Spectrum]]
    first_positions: np.ndarray
    content_hash: str
    type_sequence_path: Path
    text_ends: list[tuple[int, int]] = field(default_factory=list)
    _finalizer: weakref.finalize = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        self._finalizer = weakref.finalize(self, _remove, self.type_sequence_path)

    def spectrum(self) -> Spectrum:
        """The frequency spectrum of the whole corpus."""
        return Spectrum.from_frequencies(np.fromiter(self.counts.values(), np.int64, count=len(self.counts)))

    def types_at(self, n: int | np.ndarray) -> np.ndarray:
        """Exact text-order V(n): the number of types among the first n tokens."""
        return _types_among_first(self.first_positions, n)

    def type_ids(self) -> np.memmap:
        """The type id of every token in text order (read-only, on disk)."""
        if not self._finalizer.alive:
            raise ValueError("the count result is closed: its type-id file was deleted")
        return np.memmap(self.type_sequence_path, dtype=TYPE_ID_DTYPE, mode="r", shape=(self.tokens,))

    def text_counts(self) -> tuple[list[texts.TextCounts], int]:
        """The word counts of every text with a word token (``app.ingest.texts``), and how many texts
        without any were skipped. Needs the type-id file: call before ``close``."""
        if not self._finalizer.alive:
            raise ValueError("the count result is closed: its type-id file was deleted")
        ends, starts, sources = [], 0, []
        for end, source in self.text_ends:
            if end > starts:
                ends.append(end)
                sources.append(source)
            starts = end
        skipped = len(self.text_ends) - len(ends)
        if not ends:
            return [], skipped
        names = texts.text_names(self.names, sources)
        rank = texts.word_ranks(self.counts)
        counted = texts.per_text_counts(self.type_sequence_path, np.array(ends, dtype=np.int64), rank, names)
        return list(counted), skipped

    def close(self) -> None:
        """Delete the temporary type-id file (idempotent)."""
        self._finalizer()

    def __enter__(self) -> CountResult:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()


def _types_among_first(first_positions: np.ndarray, n: int | np.ndarray) -> np.ndarray:
    """V(n) = #{types whose first occurrence is at a 0-based position < n} (positions ascending)."""
    return np.searchsorted(first_positions, np.asarray(n), side="left")


def _remove(path: Path) -> None:
    path.unlink(missing_ok=True)


def _safe_cut(text: str) -> int:
    """Length of the longest prefix of ``text`` that can be tokenized on its own (0 if none)."""
    cut = max(text.rfind(" "), text.rfind("\n"))
    if cut >= 0:
        return cut + 1
    match = _SAFE_CUT.search(text)
    return match.end() if match else 0


@dataclass(frozen=True)
class PieceTag:
    """What is known of a piece besides its text: the input bytes read so far, and the source whose text
    ends with it (None when no text ends there)."""

    bytes_read: int
    ends_text_of: int | None


def _digested(
    chunks: Iterable[tuple[str, int]], digest: Callable[[bytes], object]
) -> Iterator[tuple[str, int]]:
    for chunk, consumed in chunks:
        digest(chunk.encode("utf-8", "surrogatepass"))
        yield chunk, consumed


def _pieces(
    sources: Sequence[TextSource],
    chunk_chars: int,
    digest: Callable[[bytes], object],
    separator: str = texts.FILE,
) -> Iterator[tuple[str, PieceTag]]:
    """The corpus cut into pieces that tokenize independently, in text order: one per chunk read (empty
    when the chunk holds no safe cut), one for the rest of each text (``app.ingest.texts``: a file or a
    part of it between separators) and one for the rest of each source. The decoded text goes to
    ``digest`` (as UTF-8, sources joined by a line break) on the way."""
    done_before = 0
    for index, source in enumerate(sources):
        if index:
            digest(_SOURCE_SEPARATOR.encode())
        carry = ""
        open_text = separator == texts.FILE  # a file is a text even when it holds no word
        for fragment, consumed, ends_text in texts.split(
            _digested(source.chunks(chunk_chars), digest), separator
        ):
            text = carry + fragment
            if ends_text:
                carry, open_text = "", False
                yield text, PieceTag(done_before + consumed, index)
                continue
            open_text = open_text or bool(fragment.strip())
            cut = _safe_cut(text)
            carry = text[cut:]
            yield text[:cut], PieceTag(done_before + consumed, None)
        done_before += source.size
        # The end of a file ends its last text, unless nothing but blanks followed the last separator.
        yield carry, PieceTag(done_before, index if open_text else None)


def _batches(
    pieces: Iterable[tuple[str, PieceTag]], chars: int
) -> Iterator[tuple[list[str], list[PieceTag]]]:
    """Consecutive pieces grouped into batches of at least ``chars`` characters (the last may be
    shorter): (pieces, their tags)."""
    texts: list[str] = []
    tags: list[PieceTag] = []
    size = 0
    for text, tag in pieces:
        texts.append(text)
        tags.append(tag)
        size += len(text)
        if size >= chars:
            yield texts, tags
            texts, tags, size = [], [], 0
    if tags:
        yield texts, tags


class _TypeSequence:
    """Merges batch counts in text order: assigns global type ids in order of first appearance, keeps
    each type's first position, and writes the global id of every token to ``sink``."""

    def __init__(self, sink: BinaryIO) -> None:
        self.sink = sink
        self.ids: dict[str, int] = {}
        self.tokens = 0
        self._first_positions: list[np.ndarray] = []
        self.text_ends: list[tuple[int, int]] = []

    def add(self, batch: BatchCounts | None, tags: Sequence[PieceTag]) -> None:
        """Merge a batch (None: its pieces hold no text) and note where each text among its pieces ends."""
        piece_ends = self.tokens + (
            np.cumsum(batch.piece_tokens) if batch is not None else np.zeros(len(tags))
        )
        for tag, end in zip(tags, piece_ends.tolist(), strict=True):
            if tag.ends_text_of is not None:
                self.text_ends.append((int(end), tag.ends_text_of))
        if batch is None:
            return
        ids, words = self.ids, batch.words()
        # Global ids of the batch's types in one C-level pass; -1 marks types not seen before.
        to_global = np.fromiter(map(ids.get, words, repeat(-1)), dtype=TYPE_ID_DTYPE, count=len(words))
        new = np.flatnonzero(to_global < 0)
        if new.size:
            fresh = np.arange(len(ids), len(ids) + new.size, dtype=TYPE_ID_DTYPE)
            to_global[new] = fresh
            ids.update(zip(map(words.__getitem__, new.tolist()), fresh.tolist(), strict=True))
            self._first_positions.append(self.tokens + batch.first[new].astype(np.int64))
        to_global[batch.ids].tofile(self.sink)
        self.tokens += batch.ids.size

    def first_positions(self) -> np.ndarray:
        """The 0-based position of every type's first occurrence, by type id (ascending)."""
        return np.concatenate([np.zeros(0, dtype=np.int64), *self._first_positions])


def _frequencies_at(path: Path, types: int, stops: Sequence[int]) -> Iterator[tuple[int, np.ndarray]]:
    """(s, frequency of every type among the first s tokens) for each s in the ascending ``stops``; the
    array is updated in place between steps. The id file is read in slices, never mapped whole."""
    counts = np.zeros(types, dtype=np.int64)
    position = 0
    with path.open("rb") as fh:
        for stop in stops:
            while position < stop:
                block = np.fromfile(fh, dtype=TYPE_ID_DTYPE, count=min(stop - position, _READ_SLICE))
                if not block.size:
                    raise ValueError(f"type-id file {path} ends after {position} tokens, expected {stop}")
                counts += np.bincount(block, minlength=types)
                position += block.size
            yield stop, counts


def count_sources(
    sources: Sequence[TextSource],
    profile: TokenizationProfile,
    progress: Progress | None = None,
    workdir: str | Path | None = None,
    chunk_chars: int = DEFAULT_CHUNK_CHARS,
    engine: EngineName | None = None,
    scheduler: str | None = None,
    separator: str = texts.FILE,
) -> CountResult:
    """Count the word tokens of ``sources`` (one corpus, in order) under ``profile``.

    ``engine`` says where the text is tokenized (see ``app.ingest.engines``): "serial" (this process),
    "local" (worker processes on all cores) or "dask" (the Dask cluster at ``scheduler``, or a local one);
    by default "dask" when a scheduler is given, "local" for inputs over ``LOCAL_MIN_BYTES`` and "serial"
    otherwise. All engines give identical results. ``progress(done_bytes, total_bytes)`` is called after
    each chunk. The type-id file goes to ``workdir`` (default: the system temporary directory). Raises
    ValueError when the corpus has no word token, UnreadableFileError for a file that cannot be read, and
    EngineUnavailableError when the engine cannot run. ``separator`` says where the texts of a file end
    (``app.ingest.texts``); ``CountResult.texts()`` then gives each text's counts.
    """
    if not sources:
        raise ValueError("no texts to count")
    names = [source.name for source in sources]
    total_bytes = sum(source.size for source in sources)
    engine = choose_engine(engine, total_bytes, scheduler)
    handle, tmp = tempfile.mkstemp(prefix=scratch.prefix(scratch.TYPE_IDS), suffix=".i32", dir=workdir)
    path = Path(tmp)
    try:
        hasher = hashlib.sha256()
        with os.fdopen(handle, "wb") as sink:
            sequence = _TypeSequence(sink)
            pieces = _pieces(sources, chunk_chars, hasher.update, separator)
            batches = _batches(pieces, BATCH_CHUNKS * chunk_chars)
            with closing(count_batches(batches, profile, engine, scheduler)) as counted:
                for batch, tags in counted:
                    sequence.add(batch, tags)
                    if progress is not None:
                        for tag in tags:
                            progress(tag.bytes_read, total_bytes)
        n_tokens, n_types = sequence.tokens, len(sequence.ids)
        if n_tokens == 0:
            raise ValueError(f"{', '.join(names)}: no word tokens found with profile {profile.name!r}")
        prefix_sizes = {p: prefix_length(p, n_tokens) for p in PREFIX_FRACTIONS}
        prefix_spectra: dict[int, Spectrum] = {}
        for size, frequencies in _frequencies_at(path, n_types, sorted({*prefix_sizes.values(), n_tokens})):
            prefix_spectra[size] = Spectrum.from_frequencies(frequencies[frequencies > 0])
    except BaseException:
        path.unlink(missing_ok=True)
        raise
    first_positions = sequence.first_positions()
    checkpoints = growth_checkpoints(n_tokens)
    growth_types = _types_among_first(first_positions, checkpoints)
    # The last step covered the whole text. The id dict becomes the counts dict in place (same keys, same
    # order, values replaced): no second dict of all types.
    counts = sequence.ids
    counts.update(zip(counts, frequencies.tolist(), strict=True))
    return CountResult(
        names=names,
        profile=profile,
        counts=counts,
        tokens=n_tokens,
        types=n_types,
        growth=[(int(n), int(v)) for n, v in zip(checkpoints, growth_types, strict=True)],
        prefix_spectra={p: (size, prefix_spectra[size]) for p, size in prefix_sizes.items()},
        first_positions=first_positions,
        content_hash=hasher.hexdigest(),
        type_sequence_path=path,
        text_ends=sequence.text_ends,
    )
