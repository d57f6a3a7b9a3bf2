"""The one error a caller of the tokenizing service has to expect for a bad input file."""

from __future__ import annotations


class UnreadableFileError(ValueError):
    """A file that cannot be turned into text; the message always names the file and the reason."""

    def __init__(self, name: str, reason: str) -> None:
        super().__init__(f"{name}: {reason}")
        self.name = name
        self.reason = reason
