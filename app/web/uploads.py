"""Receiving uploads: files are streamed to scratch files with a size cap, never held in memory."""

from __future__ import annotations

import shutil
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path, PurePath

from fastapi import UploadFile

from app.services import sources
from app.services.ingestion import IngestionInputError
from app.services.sources import Source

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


@dataclass
class ReceivedUpload:
    """Scratch copies of the uploaded files (deleted by ``cleanup``) and the sources to read."""

    directory: Path
    sources: list[Source] = field(default_factory=list)

    @property
    def total_bytes(self) -> int:
        return sum(s.size for s in self.sources)

    def cleanup(self) -> None:
        shutil.rmtree(self.directory, ignore_errors=True)


def receive(
    files: list[UploadFile],
    pasted_text: str | None,
    work_dir: Path,
    max_mb: int,
    describe: Callable[[Path, str], Source] = sources.text_file,
) -> ReceivedUpload:
    """Copy uploads to a private scratch folder (capped at ``max_mb`` in all) and open them as text sources
    (``describe``: how a received file is checked, by default as a text)."""
    limit = max_mb * (1 << 20)
    upload = ReceivedUpload(sources.upload_folder(work_dir))
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
