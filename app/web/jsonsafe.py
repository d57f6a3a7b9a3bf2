"""JSON that every parser reads: non-finite floats become null at the serialisation boundary.

Python's ``json`` writes ``NaN``, ``Infinity`` and ``-Infinity`` by default, which are not JSON (RFC 8259
section 6: "Numeric values that cannot be represented ... such as Infinity and NaN are not permitted"): a
browser's ``JSON.parse`` refuses them and the page's figures stop drawing. Every JSON response of the app
and every ``tojson`` in a template goes through ``finite``, and is then written with ``allow_nan=False``
so that a value that slipped through fails loudly instead of reaching a page.
"""

from __future__ import annotations

import json
import math
from typing import Any

from fastapi.responses import JSONResponse


def finite(value: Any) -> Any:
    """``value`` with every NaN or infinite float (at any depth of dicts, lists and tuples) replaced by None."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {key: finite(item) for key, item in value.items()}
    if isinstance(value, list | tuple):
        return [finite(item) for item in value]
    return value


def dumps(value: Any, **kwargs: Any) -> str:
    """``json.dumps`` of ``finite(value)``, refusing anything non-finite that is left. Most values hold no
    non-finite number: they are written at once, and only a value that the strict writer refuses is walked
    by ``finite`` (the walk costs several times the writing on a page's figures)."""
    try:
        return json.dumps(value, allow_nan=False, **kwargs)
    except ValueError:
        return json.dumps(finite(value), allow_nan=False, **kwargs)


class FiniteJSONResponse(JSONResponse):
    """The app's JSON response: non-finite numbers are written as null."""

    def render(self, content: Any) -> bytes:
        return dumps(content, ensure_ascii=False, separators=(",", ":")).encode("utf-8")
