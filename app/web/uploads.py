"""Receiving uploads: files are streamed to scratch files with a size cap, never held in memory."""

from __future__ import annotations

import json
import shutil
import tempfile
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path, PurePath

from fastapi import UploadFile

from app.ingest import scratch
from app.ingest.profiles import BUILTIN_PROFILES, TokenizationProfile
from app.ingest.readers import TextSource
from app.services.ingestion import IngestionInputError

COPY_BLOCK = 1 << 20
PASTED_NAME = "pasted text"
PASTED_FILE = "pasted.txt"


class UploadTooLargeError(IngestionInputError):
    pass


def safe_file_name(raw: str | None) -> str:
    """The bare file name of an upload: no directories, no control characters (path traversal is impossible)."""
    name = PurePath((raw or "").replace("\\", "/")).name
    name = "".join(ch for ch in name if ch.isprintable()).strip().lstrip(".")
    return name[:200] or "upload.txt"


def parse_profile(value: str | None) -> TokenizationProfile:
    """A built-in profile name, or a JSON object of profile settings."""
    value = (value or "").strip()
    if not value:
        return BUILTIN_PROFILES["default"]
    if value.startswith("{"):
        try:
            return TokenizationProfile.from_dict(json.loads(value))
        except (json.JSONDecodeError, TypeError) as exc:
            raise IngestionInputError(f"profile: not a valid profile object ({exc})") from exc
    if value not in BUILTIN_PROFILES:
        raise IngestionInputError(
            f"profile: unknown profile {value!r} (known: {', '.join(BUILTIN_PROFILES)})"
        )
    return BUILTIN_PROFILES[value]


@dataclass
class ReceivedUpload:
    """Scratch copies of the uploaded files (deleted by ``cleanup``) and the sources to read."""

    directory: Path
    sources: list[TextSource] = field(default_factory=list)

    @property
    def total_bytes(self) -> int:
        return sum(s.size for s in self.sources)

    def cleanup(self) -> None:
        shutil.rmtree(self.directory, ignore_errors=True)


def plain_file(path: Path, display_name: str) -> TextSource:
    """A received file described without checking it as a text (a word-count list, spectrum or bundle is
    read by ``app.ingest.counts``)."""
    return TextSource(name=display_name, kind=path.suffix.lower(), size=path.stat().st_size, path=path)


def receive(
    files: list[UploadFile],
    pasted_text: str | None,
    work_dir: Path,
    max_mb: int,
    describe: Callable[[Path, str], TextSource] = TextSource.from_path,
) -> ReceivedUpload:
    """Copy uploads to a private scratch folder (capped at ``max_mb`` in all) and open them as text sources
    (``describe``: how a received file is checked, by default as a text)."""
    limit = max_mb * (1 << 20)
    upload = ReceivedUpload(Path(tempfile.mkdtemp(prefix=scratch.prefix(scratch.UPLOAD), dir=work_dir)))
    try:
        used = 0
        for index, file in enumerate(f for f in files if f is not None and (f.filename or f.size)):
            name = safe_file_name(file.filename)
            target = upload.directory / f"{index:04d}-{name}"
            with target.open("wb") as out:
                while block := file.file.read(COPY_BLOCK):
                    used += len(block)
                    if used > limit:
                        raise UploadTooLargeError(
                            f"{name}: the upload is larger than the limit of {max_mb} MB (LEXIGROWTH_MAX_UPLOAD_MB)"
                        )
                    out.write(block)
            upload.sources.append(describe(target, name))
        if pasted_text and pasted_text.strip():
            encoded = pasted_text.removeprefix("\ufeff").encode("utf-8", "surrogatepass")
            if len(encoded) + used > limit:
                raise UploadTooLargeError(f"pasted text: larger than the limit of {max_mb} MB")
            target = upload.directory / PASTED_FILE
            target.write_bytes(encoded)
            upload.sources.append(describe(target, PASTED_NAME))
        if not upload.sources:
            raise IngestionInputError("files: choose at least one file or paste some text")
        return upload
    except BaseException:
        upload.cleanup()
        raise
