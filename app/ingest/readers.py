"""Readers: every supported file format becomes a stream of decoded text chunks.

Plain text (.txt, .md, .text) is decoded block by block and never held whole. The other formats are
parsed by their libraries (which load the document) and handed on paragraph by paragraph, page by page or
chapter by chapter:

- .html/.htm: visible text only (beautifulsoup4 with the standard-library parser); script, style, head and
  template elements are dropped and block elements end a line, so words in adjacent paragraphs never merge.
- .docx: body paragraphs and table cells in document order (python-docx); headers, footers and notes are
  not read.
- .odt: paragraphs and headings in document order, tables and frames included (odfpy).
- .pdf: the text layer page by page (pypdf); a scanned PDF without one yields no words.
- .epub: the document items in reading (spine) order, each as HTML above, without the navigation document
  and the cover page (ebooklib).

A file is checked when its ``TextSource`` is built (type, existence, encoding or container), so a bad
upload fails with ``UnreadableFileError`` before anything is stored; a file that passes the checks but
breaks its parser while being read fails with the same error.
"""

from __future__ import annotations

import codecs
import time
import zipfile
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from app.ingest.encoding import (
    SAMPLE_BYTES,
    Encoding,
    bom_encoding,
    decode_blocks,
    detect_encoding,
    looks_binary,
)
from app.ingest.errors import UnreadableFileError

if TYPE_CHECKING:
    from pypdf import PdfReader

__all__ = ["SUPPORTED_SUFFIXES", "TextSource", "UnreadableFileError", "html_to_text"]

PLAIN_SUFFIXES = (".txt", ".md", ".text")
SUPPORTED_SUFFIXES = (*PLAIN_SUFFIXES, ".html", ".htm", ".docx", ".odt", ".pdf", ".epub")
PASTED = "pasted"
DEFAULT_CHUNK_CHARS = 1 << 18

_INVISIBLE_TAGS = ("script", "style", "head", "template")
_BLOCK_TAGS = (
    "address", "article", "aside", "blockquote", "br", "caption", "dd", "div", "dl", "dt", "figcaption",
    "figure", "footer", "h1", "h2", "h3", "h4", "h5", "h6", "header", "hr", "li", "main", "nav", "ol", "p",
    "pre", "section", "table", "td", "th", "tr", "ul",
)  # fmt: skip
_ZIP_MEMBERS = {".docx": "word/document.xml", ".odt": "content.xml", ".epub": "META-INF/container.xml"}
_PDF_HEADER_WINDOW = 1024
MAX_UNCOMPRESSED_BYTES = 512 * 1024 * 1024  # a .docx/.odt/.epub may unpack to at most this much
MAX_COMPRESSION_RATIO = 200  # and its members together at most this many times their packed size
RATIO_CHECK_FROM = 8 * 1024 * 1024  # (the ratio is checked once the unpacked size exceeds this)
MAX_PDF_PAGES = 5_000
MAX_PDF_SECONDS = 120.0


@dataclass(frozen=True)
class TextSource:
    """One input text: a checked file on disk or pasted text, read as chunks of decoded text.

    ``size`` is the input's size in bytes (UTF-8 bytes for pasted text), the scale of the progress that
    ``chunks`` reports. ``encoding`` is the detected codec of a plain-text file.
    """

    name: str
    kind: str
    size: int
    path: Path | None = None
    encoding: Encoding | None = None
    text: str | None = field(default=None, repr=False)

    @classmethod
    def from_path(
        cls, path: str | Path, display_name: str | None = None, encoding: str | None = None
    ) -> TextSource:
        """Check a file and describe it. The type comes from ``display_name`` (an upload's original name)
        when it has a suffix, else from ``path``. ``encoding`` names the codec of a plain-text file and
        skips detection (for the rare file detection gets wrong). Raises UnreadableFileError."""
        path = Path(path)
        name = display_name or path.name
        kind = (Path(name).suffix or path.suffix).lower()
        if kind not in SUPPORTED_SUFFIXES:
            what = f"'{kind}'" if kind else "(no file extension)"
            raise UnreadableFileError(
                name, f"unsupported file type {what} (supported: {', '.join(SUPPORTED_SUFFIXES)})"
            )
        if not path.is_file():
            raise UnreadableFileError(name, "file not found")
        try:
            detected = _CHECKS[kind](path, kind) if encoding is None else _given_encoding(encoding, kind)
        except ValueError as exc:
            raise UnreadableFileError(name, str(exc)) from exc
        except OSError as exc:
            raise UnreadableFileError(name, f"cannot be opened ({exc.strerror or exc})") from exc
        return cls(name=name, kind=kind, size=path.stat().st_size, path=path, encoding=detected)

    @classmethod
    def from_text(cls, name: str, text: str) -> TextSource:
        """Pasted text; a leading byte-order mark is dropped."""
        text = text.removeprefix("\ufeff")
        return cls(name=name, kind=PASTED, size=len(text.encode("utf-8")), text=text)

    def chunks(self, chunk_chars: int = DEFAULT_CHUNK_CHARS) -> Iterator[tuple[str, int]]:
        """(text chunk, input bytes consumed so far) pairs; chunks hold about ``chunk_chars`` characters and
        may end inside a word. Raises UnreadableFileError when the file breaks its parser."""
        if chunk_chars < 1:
            raise ValueError("chunk_chars must be positive")
        if self.text is not None:
            yield from _pasted_chunks(self.text, chunk_chars)
            return
        try:
            yield from _READERS[self.kind](self, chunk_chars)
        except UnreadableFileError:
            raise
        except OSError as exc:
            raise UnreadableFileError(self.name, f"cannot be read ({exc.strerror or exc})") from exc
        except Exception as exc:  # the format libraries raise many types on damaged files
            raise UnreadableFileError(self.name, f"not a valid {self.kind} file ({exc})") from exc

    def read_text(self) -> str:
        """The whole text at once (for small inputs and tests)."""
        return "".join(chunk for chunk, _ in self.chunks())


# --- checks on construction: return the plain-text encoding or None, raise ValueError with a reason ---


def _check_plain(path: Path, kind: str) -> Encoding:
    with path.open("rb") as fh:
        sample = fh.read(SAMPLE_BYTES)
        complete = not fh.read(1)
    return detect_encoding(sample, complete)


def _given_encoding(codec: str, kind: str) -> Encoding:
    if kind not in PLAIN_SUFFIXES:
        raise ValueError(f"an encoding can only be given for plain text ({', '.join(PLAIN_SUFFIXES)})")
    try:
        return Encoding(codecs.lookup(codec).name)
    except LookupError:
        raise ValueError(f"unknown encoding {codec!r}") from None


def _check_html(path: Path, kind: str) -> None:
    with path.open("rb") as fh:
        sample = fh.read(SAMPLE_BYTES)
    if bom_encoding(sample) is None and looks_binary(sample):
        raise ValueError("looks like binary data, not HTML")


def _check_zip(path: Path, kind: str) -> None:
    if not zipfile.is_zipfile(path):
        raise ValueError(f"not a valid {kind} file (bad zip archive)")
    try:
        with zipfile.ZipFile(path) as archive:
            members = archive.infolist()
    except zipfile.BadZipFile as exc:
        raise ValueError(f"not a valid {kind} file (bad zip archive: {exc})") from exc
    names = {m.filename for m in members}
    unpacked = sum(m.file_size for m in members)
    packed = max(sum(m.compress_size for m in members), 1)
    # Zip bombs: refuse archives that unpack to more than the cap, or far more than they weigh. Python's
    # zipfile also stops at the declared size of a member, so a member cannot lie its way past this check.
    if unpacked > MAX_UNCOMPRESSED_BYTES:
        raise ValueError(
            f"unpacks to {unpacked / 2**20:,.0f} MB, more than the limit of {MAX_UNCOMPRESSED_BYTES // 2**20} MB"
        )
    if unpacked > RATIO_CHECK_FROM and unpacked / packed > MAX_COMPRESSION_RATIO:
        raise ValueError(
            f"unpacks to {unpacked / packed:,.0f} times its size (limit {MAX_COMPRESSION_RATIO}): refused as a possible zip bomb"
        )
    if _ZIP_MEMBERS[kind] not in names:
        raise ValueError(f"not a valid {kind} file (no {_ZIP_MEMBERS[kind]} in the archive)")


def _check_pdf(path: Path, kind: str) -> None:
    with path.open("rb") as fh:
        head = fh.read(_PDF_HEADER_WINDOW)
    if b"%PDF-" not in head:
        raise ValueError("not a valid .pdf file (no PDF header)")
    _open_pdf(path)


_CHECKS: dict[str, Callable[[Path, str], Encoding | None]] = {
    **dict.fromkeys(PLAIN_SUFFIXES, _check_plain),
    ".html": _check_html,
    ".htm": _check_html,
    ".docx": _check_zip,
    ".odt": _check_zip,
    ".epub": _check_zip,
    ".pdf": _check_pdf,
}


# --- readers: (source, chunk_chars) -> (text chunk, bytes consumed so far) ---


def _read_plain(source: TextSource, chunk_chars: int) -> Iterator[tuple[str, int]]:
    assert source.path is not None and source.encoding is not None
    with source.path.open("rb") as fh:
        # One byte decodes to at most one character in every supported codec, so blocks of
        # chunk_chars bytes give chunks of at most chunk_chars characters.
        yield from decode_blocks(fh, source.encoding, chunk_chars)


def _pasted_chunks(text: str, chunk_chars: int) -> Iterator[tuple[str, int]]:
    consumed = 0
    for start in range(0, len(text), chunk_chars):
        chunk = text[start : start + chunk_chars]
        consumed += len(chunk.encode("utf-8"))
        yield chunk, consumed


def _batched(parts: Iterable[str], count: int, size: int, chunk_chars: int) -> Iterator[tuple[str, int]]:
    """Join ``count`` document parts (paragraphs, pages, chapters) with line breaks into chunks of about
    ``chunk_chars`` characters; progress is the share of parts read, scaled to the file size."""
    buffer: list[str] = []
    buffered = 0
    for i, part in enumerate(parts, start=1):
        buffer.append(part)
        buffered += len(part) + 1
        if buffered >= chunk_chars or i == count:
            yield "\n".join(buffer) + "\n", round(size * i / count)
            buffer, buffered = [], 0


def html_to_text(markup: bytes | str) -> str:
    """The visible text of an HTML document; block elements end a line. Bytes are decoded by
    beautifulsoup4 (byte-order mark, declared charset, then detection)."""
    from bs4 import BeautifulSoup

    soup = BeautifulSoup(markup, "html.parser")
    for tag in soup.find_all(_INVISIBLE_TAGS):
        tag.decompose()
    for tag in soup.find_all(_BLOCK_TAGS):
        tag.insert_before("\n")
        tag.insert_after("\n")
    return soup.get_text()


def _read_html(source: TextSource, chunk_chars: int) -> Iterator[tuple[str, int]]:
    assert source.path is not None
    text = html_to_text(source.path.read_bytes())
    parts = [text[i : i + chunk_chars] for i in range(0, len(text), chunk_chars)]
    for i, part in enumerate(parts, start=1):
        yield part, round(source.size * i / len(parts))


def _docx_blocks(container: Any) -> Iterator[str]:
    """Paragraph texts of a document or table cell in order, descending into tables cell by cell."""
    from docx.table import Table, _Cell

    for block in container.iter_inner_content():
        if isinstance(block, Table):
            for row in block.rows:
                # The cell elements themselves, so that a merged cell is read once.
                for tc in row._tr.tc_lst:
                    yield from _docx_blocks(_Cell(tc, block))
        else:
            yield block.text


def _read_docx(source: TextSource, chunk_chars: int) -> Iterator[tuple[str, int]]:
    import docx

    document = docx.Document(str(source.path))
    blocks = list(_docx_blocks(document))
    yield from _batched(blocks, len(blocks), source.size, chunk_chars)


def _odt_blocks(node: Any) -> Iterator[str]:
    """Texts of the paragraph and heading elements below ``node`` in document order."""
    from odf import teletype
    from odf.namespaces import TEXTNS

    for child in node.childNodes:
        if getattr(child, "qname", None) in ((TEXTNS, "p"), (TEXTNS, "h")):
            yield teletype.extractText(child)
        elif child.nodeType == child.ELEMENT_NODE:
            yield from _odt_blocks(child)


def _read_odt(source: TextSource, chunk_chars: int) -> Iterator[tuple[str, int]]:
    from odf.opendocument import load

    document = load(str(source.path))
    blocks = list(_odt_blocks(document.text))
    yield from _batched(blocks, len(blocks), source.size, chunk_chars)


def _open_pdf(path: Path) -> PdfReader:
    """Open a PDF and its page tree; ValueError with the reason when that fails."""
    from pypdf import PdfReader

    try:
        reader = PdfReader(str(path))
        encrypted = reader.is_encrypted and not reader.decrypt("")
        len(reader.pages)
    except Exception as exc:  # pypdf raises many types on damaged files
        raise ValueError(f"not a valid .pdf file ({exc})") from exc
    if encrypted:
        raise ValueError("is password-protected")
    if len(reader.pages) > MAX_PDF_PAGES:
        raise ValueError(f"has {len(reader.pages):,} pages, more than the limit of {MAX_PDF_PAGES:,}")
    return reader


def _read_pdf(source: TextSource, chunk_chars: int) -> Iterator[tuple[str, int]]:
    assert source.path is not None
    reader = _open_pdf(source.path)
    deadline = time.monotonic() + MAX_PDF_SECONDS

    def pages() -> Iterator[str]:
        for number, page in enumerate(reader.pages, start=1):
            if time.monotonic() > deadline:
                raise UnreadableFileError(
                    source.name,
                    f"reading its text took longer than {MAX_PDF_SECONDS:.0f} s (stopped at page {number})",
                )
            try:
                yield page.extract_text() or ""
            except Exception as exc:  # pypdf raises many types on damaged pages
                raise UnreadableFileError(source.name, f"page {number} cannot be read ({exc})") from exc

    yield from _batched(pages(), len(reader.pages), source.size, chunk_chars)


def _read_epub(source: TextSource, chunk_chars: int) -> Iterator[tuple[str, int]]:
    import ebooklib
    from ebooklib import epub

    book = epub.read_epub(str(source.path), options={"ignore_ncx": True})
    chapters = []
    for entry in book.spine:
        item = book.get_item_with_id(entry[0] if isinstance(entry, tuple) else entry)
        # is_chapter() is False for the navigation document (the table of contents) and the cover page.
        if item is not None and item.get_type() == ebooklib.ITEM_DOCUMENT and item.is_chapter():
            chapters.append(html_to_text(item.get_content()))
    yield from _batched(chapters, len(chapters), source.size, chunk_chars)


_READERS: dict[str, Callable[[TextSource, int], Iterator[tuple[str, int]]]] = {
    **dict.fromkeys(PLAIN_SUFFIXES, _read_plain),
    ".html": _read_html,
    ".htm": _read_html,
    ".docx": _read_docx,
    ".odt": _read_odt,
    ".pdf": _read_pdf,
    ".epub": _read_epub,
}
