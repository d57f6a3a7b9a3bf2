"""Jinja2 environment with our number formats."""

from __future__ import annotations

import math
from pathlib import Path

from fastapi.templating import Jinja2Templates

from app.web import jsonsafe


def thousands(value: float | int | None, decimals: int = 0) -> str:
    """1234567.8 -> '1,234,568' (or with ``decimals``); '–' for missing values."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "–"
    return f"{value:,.{decimals}f}"


def percent(value: float | None, decimals: int = 1) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "–"
    return f"{100 * value:.{decimals}f}%"


def make_templates(directory: Path) -> Jinja2Templates:
    templates = Jinja2Templates(directory=str(directory))
    # Templates are part of the installed program: not checked for changes on disk at every page.
    templates.env.auto_reload = False
    templates.env.filters["thousands"] = thousands
    templates.env.filters["percent"] = percent
    # Figures and data embedded with |tojson: NaN and infinities become null (see app.web.jsonsafe).
    templates.env.policies["json.dumps_function"] = jsonsafe.dumps
    return templates
