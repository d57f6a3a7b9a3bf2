"""Reading what a person typed into a form.

A browser sends every field of a form, the empty ones as ``name=``: an empty optional field means "not
given". Pages read their fields as text with ``FormInput``, keep the text to show it back exactly as typed,
and collect each problem beside its field instead of answering with an error page. The JSON API accepts the
same empty values through ``blank_is_none``.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Annotated, Any

from fastapi import HTTPException
from pydantic import BeforeValidator, Field

_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)(e[+-]?\d+)?")


def blank_is_none(value: Any) -> Any:
    """An empty or blank text becomes None ("not given"); anything else passes unchanged."""
    if isinstance(value, str) and not value.strip():
        return None
    return value


BlankIsNone = BeforeValidator(blank_is_none)


def optional(kind: type, **limits: float) -> Any:
    """``kind | None`` where an empty text means None, and ``limits`` (gt, ge, lt, le) apply to a value."""
    return Annotated[Annotated[kind, Field(**limits)] | None, BlankIsNone]


def parse_number(text: str) -> float:
    """'30000', '30,000', '30 000', '1e6', '0.001' -> float; ValueError for anything else."""
    cleaned = re.sub(r"[,\s_\u00a0\u202f]", "", text.strip().lower())
    if not _NUMBER.fullmatch(cleaned):
        raise ValueError(f"{text.strip()[:40]!r} is not a number")
    value = float(cleaned)
    if not math.isfinite(value):
        raise ValueError(f"{text.strip()[:40]!r} is not a finite number")
    return value


@dataclass
class FormInput:
    """The fields of one request as typed, the values read from them, and a message per bad field."""

    typed: Mapping[str, str | None]
    errors: dict[str, str] = field(default_factory=dict)

    def text(self, name: str) -> str:
        """The field as typed ('' when absent), for showing it back in the form."""
        value = self.typed.get(name)
        return "" if value is None else value

    def given(self, name: str) -> bool:
        return bool(self.text(name).strip())

    def number(
        self,
        name: str,
        label: str,
        *,
        whole: bool = False,
        above: float | None = None,
        at_least: float | None = None,
        below: float | None = None,
        at_most: float | None = None,
    ) -> float | int | None:
        """The field as a number within the given limits; None when it is empty or wrong (then with a
        message in ``errors[name]`` saying why, in words)."""
        if not self.given(name):
            return None
        try:
            value = parse_number(self.text(name))
        except ValueError as exc:
            self.errors[name] = f"{label}: {exc}"
            return None
        if whole and value != int(value):
            self.errors[name] = f"{label}: give a whole number"
            return None
        limits = [
            (above, lambda v, x: v <= x, "more than"),
            (at_least, lambda v, x: v < x, "at least"),
            (below, lambda v, x: v >= x, "less than"),
            (at_most, lambda v, x: v > x, "at most"),
        ]
        for limit, breaks, words in limits:
            if limit is not None and breaks(value, limit):
                self.errors[name] = f"{label}: must be {words} {limit:,g}"
                return None
        return int(value) if whole else value

    def fail(self, name: str, message: str) -> None:
        self.errors.setdefault(name, message)

    def errors_of(self, *names: str) -> list[str]:
        return [self.errors[n] for n in names if n in self.errors]


def require_confirmation(confirm: str) -> None:
    """A deletion from a page goes ahead only when its form says it was confirmed (``confirm=yes``: a
    second button after "Delete…", or a ticked box); otherwise 422 and nothing is deleted."""
    if confirm != "yes":
        raise HTTPException(status_code=422, detail="confirm the deletion first: nothing was deleted")
