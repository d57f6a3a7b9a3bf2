"""Readers: every format round-trips a known text; encodings are detected; bad files are named.

The .docx, .odt, .pdf and .epub fixtures are written in the tests by the formats' own writer libraries
(python-docx, odfpy, reportlab, ebooklib), which are independent of the reading code paths.
"""

from __future__ import annotations

import codecs
import zipfile
from pathlib import Path

import pytest

from app.ingest.profiles import TokenizationProfile
from app.ingest.readers import SUPPORTED_SUFFIXES, TextSource, UnreadableFileError

TOKENS = TokenizationProfile().tokenizer().tokens

PARAGRAPHS = [
    "The quick brown fox jumps over the lazy dog.",
    "Ça coûte l'été à Zürich, naïve Straße und Grüße.",
    "Well-known words don't vanish between paragraphs",
    "Last line ends here",
]


def _consumed_is_monotone_and_complete(source: TextSource, chunk_chars: int) -> str:
    parts = list(source.chunks(chunk_chars))
    consumed = [c for _, c in parts]
    assert consumed == sorted(consumed)
    assert consumed[-1] == source.size
    return "".join(text for text, _ in parts)


# --- plain text and encodings ---

MULTILINGUAL = "Grüße aus Köln — “quoted” l’été, Ελληνικά, Русский, 東京. Ends\n"
WESTERN = "Gabriël zag de coöperatie en het café; één reünie, garçon déçu, Straße. Fin.\n"


@pytest.mark.parametrize(
    ("label", "raw", "text", "codecs_accepted"),
    [
        ("utf-8", MULTILINGUAL.encode("utf-8"), MULTILINGUAL, {"utf-8"}),
        ("utf-8-sig", MULTILINGUAL.encode("utf-8-sig"), MULTILINGUAL, {"utf-8-sig"}),
        ("utf-16 (native BOM)", MULTILINGUAL.encode("utf-16"), MULTILINGUAL, {"utf-16"}),
        ("utf-16-le BOM", codecs.BOM_UTF16_LE + MULTILINGUAL.encode("utf-16-le"), MULTILINGUAL, {"utf-16"}),
        ("utf-16-be BOM", codecs.BOM_UTF16_BE + MULTILINGUAL.encode("utf-16-be"), MULTILINGUAL, {"utf-16"}),
        ("utf-32", MULTILINGUAL.encode("utf-32"), MULTILINGUAL, {"utf-32"}),
        # Without a byte-order mark, UTF-16 is told by the parity of its NUL bytes (app.ingest.encoding).
        ("utf-16-le, no BOM", MULTILINGUAL.encode("utf-16-le"), MULTILINGUAL, {"utf-16-le"}),
        ("utf-16-be, no BOM", MULTILINGUAL.encode("utf-16-be"), MULTILINGUAL, {"utf-16-be"}),
        (
            "utf-16-le, no BOM, Cyrillic",
            ("Мороз и солнце; день чудесный! " * 4).encode("utf-16-le"),
            "Мороз и солнце; день чудесный! " * 4,
            {"utf-16-le"},
        ),
        ("latin-1", (WESTERN * 3).encode("latin-1"), WESTERN * 3, {"cp1252", "latin_1"}),
        (
            "cp1252",
            ("“Smart” quotes – and € signs… " + WESTERN).encode("cp1252"),
            "“Smart” quotes – and € signs… " + WESTERN,
            {"cp1252"},
        ),
        (
            "cp1251",
            ("Мороз и солнце; день чудесный! " * 4).encode("cp1251"),
            "Мороз и солнце; день чудесный! " * 4,
            {"cp1251"},
        ),
    ],
)
def test_encodings_are_detected_and_decoded(
    tmp_path: Path, label: str, raw: bytes, text: str, codecs_accepted: set[str]
) -> None:
    path = tmp_path / "sample.txt"
    path.write_bytes(raw)
    source = TextSource.from_path(path)
    assert source.encoding is not None and source.encoding.codec in codecs_accepted, label
    assert source.read_text() == text  # the byte-order mark is stripped
    # Blocks of 1 to 7 bytes cut inside multi-byte characters; the incremental decoder must not care.
    for chunk_chars in (1, 2, 3, 7):
        assert _consumed_is_monotone_and_complete(source, chunk_chars) == text


def test_utf8_file_with_stray_cp1252_bytes_after_the_sample(tmp_path: Path) -> None:
    head = "plain ascii words\n" * 5000  # 90,000 bytes: more than the detection sample
    path = tmp_path / "mixed.txt"
    path.write_bytes(head.encode() + "café naïve".encode("cp1252") + " ünïcode".encode())
    source = TextSource.from_path(path)
    assert source.encoding is not None and source.encoding.codec == "utf-8"
    assert source.read_text() == head + "café naïve ünïcode"


@pytest.mark.parametrize("suffix", [".txt", ".md", ".text"])
def test_plain_text_suffixes_and_display_name(tmp_path: Path, suffix: str) -> None:
    path = tmp_path / "upload.bin"
    path.write_text("# Heading\n\nSome *markdown* text.\n", encoding="utf-8")
    source = TextSource.from_path(path, display_name=f"notes{suffix}")
    assert (source.name, source.kind, source.size) == (f"notes{suffix}", suffix, path.stat().st_size)
    assert TOKENS(source.read_text()) == ["heading", "some", "markdown", "text"]


def test_pasted_text(tmp_path: Path) -> None:
    text = "\ufeffPasted text — with “quotes” and ünïcödé"
    source = TextSource.from_text("pasted", text)
    assert source.size == len(text[1:].encode("utf-8"))
    assert _consumed_is_monotone_and_complete(source, 4) == text[1:]


# --- HTML ---


def test_html_keeps_visible_text_only(tmp_path: Path) -> None:
    html = """<!DOCTYPE html><html><head><title>Hidden title</title><style>p {color: red}</style>
    <script>var hidden = "script";</script></head>
    <body><!-- hidden comment --><h1>Visible heading</h1><p>first<b>half</b> of a word</p><p>next</p>
    <template><p>hidden template</p></template><div>div text<br>after break</div>
    <table><tr><td>cell</td><td>two</td></tr></table><script>hidden()</script>
    <p>Entities &amp; soft&shy;hyphen &eacute;t&eacute;</p></body></html>"""
    path = tmp_path / "page.html"
    path.write_text(html, encoding="utf-8")
    assert TOKENS(_consumed_is_monotone_and_complete(TextSource.from_path(path), 16)) == [
        "visible", "heading", "firsthalf", "of", "a", "word", "next", "div", "text", "after", "break",
        "cell", "two", "entities", "softhyphen", "été",
    ]  # fmt: skip


def test_html_declared_charset_is_honoured(tmp_path: Path) -> None:
    html = '<html><head><meta charset="windows-1252"></head><body><p>“Café” – naïve</p></body></html>'
    path = tmp_path / "legacy.htm"
    path.write_bytes(html.encode("cp1252"))
    assert TOKENS(TextSource.from_path(path).read_text()) == ["café", "naïve"]


# --- documents written by their own libraries ---


def _write_docx(path: Path) -> list[str]:
    import docx

    document = docx.Document()
    document.add_heading("Report heading", level=1)
    for paragraph in PARAGRAPHS[:3]:
        document.add_paragraph(paragraph)
    table = document.add_table(rows=2, cols=3)
    merged = table.cell(0, 0).merge(table.cell(0, 1))
    merged.text = "merged cell"
    table.cell(0, 2).text = "alpha"
    table.cell(1, 0).text = "beta"
    table.cell(1, 1).text = "gamma"
    table.cell(1, 2).text = "delta"
    document.add_paragraph(PARAGRAPHS[3])
    document.save(str(path))
    return ["Report heading", *PARAGRAPHS[:3], "merged cell alpha beta gamma delta", PARAGRAPHS[3]]


def _write_odt(path: Path) -> list[str]:
    from odf.opendocument import OpenDocumentText
    from odf.table import Table, TableCell, TableColumn, TableRow
    from odf.text import H, P, Span

    document = OpenDocumentText()
    document.text.addElement(H(outlinelevel=1, text="Report heading"))
    for paragraph in PARAGRAPHS[:3]:
        document.text.addElement(P(text=paragraph))
    table = Table(name="Words")
    table.addElement(TableColumn(numbercolumnsrepeated=2))
    row = TableRow()
    for word in ("alpha", "beta"):
        cell = TableCell()
        cell.addElement(P(text=word))
        row.addElement(cell)
    table.addElement(row)
    document.text.addElement(table)
    last = P(text="Last line ")
    last.addElement(Span(text="ends here"))
    document.text.addElement(last)
    document.save(str(path))
    return ["Report heading", *PARAGRAPHS[:3], "alpha beta", PARAGRAPHS[3]]


def _write_pdf(path: Path) -> list[str]:
    from reportlab.pdfgen import canvas

    pages = [PARAGRAPHS[:2], PARAGRAPHS[2:]]
    pdf = canvas.Canvas(str(path))
    for lines in pages:
        for i, line in enumerate(lines):
            pdf.drawString(72, 720 - 20 * i, line)
        pdf.showPage()
    pdf.save()
    return PARAGRAPHS


def _write_epub(path: Path) -> list[str]:
    from ebooklib import epub

    book = epub.EpubBook()
    book.set_identifier("lexigrowth-test")
    book.set_title("Test book")
    book.set_language("en")
    chapters = []
    for i, paragraph in enumerate(PARAGRAPHS):
        chapter = epub.EpubHtml(title=f"Chapter {i}", file_name=f"chapter{i}.xhtml", lang="en")
        chapter.content = f"<html><body><p>{paragraph}</p><script>hidden()</script></body></html>"
        chapters.append(chapter)
    for chapter in reversed(chapters):  # manifest order differs from reading order
        book.add_item(chapter)
    book.toc = chapters
    book.add_item(epub.EpubNcx())
    book.add_item(epub.EpubNav())
    book.spine = ["nav", *chapters]
    epub.write_epub(str(path), book)
    return PARAGRAPHS


@pytest.mark.parametrize(
    ("suffix", "writer"),
    [(".docx", _write_docx), (".odt", _write_odt), (".pdf", _write_pdf), (".epub", _write_epub)],
)
def test_documents_round_trip(tmp_path: Path, suffix: str, writer) -> None:
    path = tmp_path / f"document{suffix}"
    expected = writer(path)
    source = TextSource.from_path(path)
    assert source.kind == suffix
    text = _consumed_is_monotone_and_complete(source, 10)
    assert TOKENS(text) == TOKENS(" ".join(expected))


# --- files that cannot be read ---


def _expect_unreadable(path: Path, *fragments: str, display_name: str | None = None) -> None:
    with pytest.raises(UnreadableFileError) as excinfo:
        source = TextSource.from_path(path, display_name=display_name)
        list(source.chunks())
    message = str(excinfo.value)
    assert message.startswith(f"{display_name or path.name}: ")
    for fragment in fragments:
        assert fragment in message


def test_unsupported_suffix(tmp_path: Path) -> None:
    path = tmp_path / "notes.xyz"
    path.write_text("words")
    _expect_unreadable(path, "unsupported file type '.xyz'", "(supported: .txt, .md, .text, .html")
    assert len(SUPPORTED_SUFFIXES) == 9
    path = tmp_path / "README"
    path.write_text("words")
    _expect_unreadable(path, "unsupported file type (no file extension)")


def test_missing_file(tmp_path: Path) -> None:
    _expect_unreadable(tmp_path / "gone.txt", "file not found")


@pytest.mark.parametrize(
    ("name", "raw", "reason"),
    [
        (
            "x.txt",
            b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR" + bytes(range(256)) * 4,
            "looks like binary data, not text",
        ),
        ("x.txt", b"text with a NUL\x00 byte", "looks like binary data, not text"),
        ("x.txt", b"\x01\x02\x03\x04 mostly control bytes \x05\x06\x07\x08" * 20, "looks like binary data"),
        # NULs on every other offset of three in four: not UTF-16; the message says what would work.
        (
            "x.txt",
            "UTF-32 without a byte-order mark".encode("utf-32-le"),
            "save it as UTF-8, or with a byte-order",
        ),
        ("page.html", b"\x00\x01\x02" * 100, "looks like binary data, not HTML"),
        *(
            (
                f"draft{suffix}",
                b"this is not a zip archive at all" * 10,
                f"not a valid {suffix} file (bad zip archive)",
            )
            for suffix in (".docx", ".odt", ".epub")
        ),
        ("paper.pdf", b"%PDF-1.4\n garbage without any objects", "not a valid .pdf file"),
        ("paper.pdf", b"<html>not a pdf</html>", "not a valid .pdf file (no PDF header)"),
    ],
)
def test_files_that_are_not_what_their_name_says(tmp_path: Path, name: str, raw: bytes, reason: str) -> None:
    path = tmp_path / name
    path.write_bytes(raw)
    _expect_unreadable(path, reason)


@pytest.mark.parametrize(("suffix", "member"), [(".docx", "word/document.xml"), (".odt", "content.xml")])
def test_zip_without_the_main_part(tmp_path: Path, suffix: str, member: str) -> None:
    path = tmp_path / f"draft{suffix}"
    with zipfile.ZipFile(path, "w") as archive:
        archive.writestr("something.txt", "hello")
    _expect_unreadable(path, f"no {member} in the archive")


def test_truncated_docx_uses_the_display_name(tmp_path: Path) -> None:
    good = tmp_path / "good.docx"
    _write_docx(good)
    path = tmp_path / "upload-1234"
    path.write_bytes(good.read_bytes()[: good.stat().st_size // 2])
    _expect_unreadable(path, "not a valid .docx file", display_name="draft.docx")


def test_docx_with_broken_xml_fails_while_reading(tmp_path: Path) -> None:
    good = tmp_path / "good.docx"
    _write_docx(good)
    path = tmp_path / "broken.docx"
    with zipfile.ZipFile(good) as source, zipfile.ZipFile(path, "w") as target:
        for item in source.infolist():
            data = source.read(item.filename)
            target.writestr(item, b"<w:document><unclosed" if item.filename == "word/document.xml" else data)
    _expect_unreadable(path, "not a valid .docx file")


def test_corrupt_epub(tmp_path: Path) -> None:
    path = tmp_path / "book.epub"
    with zipfile.ZipFile(path, "w") as archive:
        archive.writestr("META-INF/container.xml", "<container><broken")
    _expect_unreadable(path, "not a valid .epub file")


def test_given_encoding_skips_detection(tmp_path: Path) -> None:
    # ISO-8859-2 Polish: short samples are ambiguous between the single-byte code pages.
    text = "Zażółć gęślą jaźń. Pchnąć w tę łódź jeża.\n"
    path = tmp_path / "polski.txt"
    path.write_bytes(text.encode("iso8859_2"))
    source = TextSource.from_path(path, encoding="latin2")
    assert source.encoding is not None and source.encoding.codec == "iso8859-2"
    assert source.read_text() == text
    with pytest.raises(UnreadableFileError, match="^polski.txt: unknown encoding 'klingon'$"):
        TextSource.from_path(path, encoding="klingon")
    docx_path = tmp_path / "draft.docx"
    _write_docx(docx_path)
    with pytest.raises(
        UnreadableFileError, match="^draft.docx: an encoding can only be given for plain text"
    ):
        TextSource.from_path(docx_path, encoding="utf-8")


def test_mixed_utf8_and_cp1252_is_read_as_utf8_with_fallback():
    # Mostly UTF-8 with stray Windows-1252 bytes (a pasted-in fragment): the UTF-8 parts stay intact.
    from app.ingest.encoding import detect_encoding

    sample = "naïve café Grüße ".encode() * 3 + b"caf\xe9 na\xefve"
    assert detect_encoding(sample, complete=True).codec == "utf-8"
    # A genuine Latin-1 text has no valid UTF-8 sequences and is not taken for UTF-8.
    assert detect_encoding("naïve café à l'été".encode("latin-1") * 5, complete=True).codec != "utf-8"
