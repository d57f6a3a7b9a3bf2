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


SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def significant(value: float | int | None, digits: int = 4) -> str:
    """A parameter with ``digits`` significant digits, as a plain number where one reads better (53,010 and
    0.0123 rather than 5.301e+04 and 1.23e-02), in powers of ten only far from 1 (1.234 × 10⁻⁵)."""
    if value is None or not math.isfinite(value):
        return "–"
    if value == 0:
        return "0"
    magnitude = math.floor(math.log10(abs(value)))
    if -3 <= magnitude < 9:
        return f"{value:,.{max(0, digits - 1 - magnitude)}f}"
    mantissa = value / 10**magnitude
    return f"{mantissa:.{digits - 1}f} × 10{str(magnitude).translate(SUPERSCRIPT)}"


def make_templates(directory: Path) -> Jinja2Templates:
    templates = Jinja2Templates(directory=str(directory))
    # Templates are part of the installed program: not checked for changes on disk at every page.
    templates.env.auto_reload = False
    templates.env.filters["thousands"] = thousands
    templates.env.filters["percent"] = percent
    templates.env.filters["significant"] = significant
    # Figures and data embedded with |tojson: NaN and infinities become null (see app.web.jsonsafe).
    templates.env.policies["json.dumps_function"] = jsonsafe.dumps
    return templates
