"""What an upload or the command line hands to ingestion: tokenization profiles, received files described
as sources to read, the scratch folder of an upload, and the errors that mean the input cannot be read.

The front door to ``app.ingest`` for the web and the command line (they import no ingest module)."""

from __future__ import annotations

import json
import tempfile
from pathlib import Path

from app.ingest import scratch
from app.ingest import texts as text_units
from app.ingest.profiles import BUILTIN_PROFILES, TokenizationProfile, get_profile
from app.ingest.readers import TextSource, UnreadableFileError
from app.services.ingestion import IngestionInputError

Source = TextSource
"""A file to read: its display name, kind (suffix), size in bytes and path."""

Profile = TokenizationProfile
"""A tokenization profile: how a text is cut into word tokens and normalised."""

INPUT_ERRORS = (IngestionInputError, UnreadableFileError, ValueError)
"""The errors that mean input cannot become a corpus (the message says why; nothing is stored)."""


def profiles() -> dict[str, Profile]:
    """The built-in tokenization profiles by name, ``default`` first."""
    return dict(BUILTIN_PROFILES)


def profile_named(name: str) -> Profile:
    """The built-in profile called ``name``; ValueError naming the available ones otherwise."""
    return get_profile(name)


def parse_profile(value: str | None) -> Profile:
    """A built-in profile name, or a JSON object of profile settings (empty: the default profile)."""
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


def text_file(path: Path, display_name: str | None = None) -> Source:
    """A file of text, checked as one (its encoding detected; ``UnreadableFileError`` when it is no text)."""
    return TextSource.from_path(path, display_name)


def plain_file(path: Path, display_name: str) -> Source:
    """A received file described without checking it as a text (a word-count list, spectrum or bundle is
    read by ``app.ingest.counts``)."""
    return TextSource(name=display_name, kind=path.suffix.lower(), size=path.stat().st_size, path=path)


def splits_texts(separator: str) -> bool:
    """Whether a text separator cuts files into several texts (every separator but ``file``)."""
    return separator != text_units.FILE


def upload_folder(work_dir: Path) -> Path:
    """A new private scratch folder for the files of one upload (named so that a server that starts again
    removes those of a process that has died)."""
    return Path(tempfile.mkdtemp(prefix=scratch.prefix(scratch.UPLOAD), dir=work_dir))
