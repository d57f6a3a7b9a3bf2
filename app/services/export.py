"""Table exports shared by the web downloads and the command line (CSV/TSV with the API's column names)."""

from __future__ import annotations

import csv
import io
from collections.abc import Iterable, Sequence

FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def neutralise(cell: object) -> object:
    """Prefix text cells that a spreadsheet would run as a formula with an apostrophe (OWASP CSV injection)."""
    if isinstance(cell, str) and cell.startswith(FORMULA_START):
        return "'" + cell
    return cell


def table_text(header: Sequence[str], rows: Iterable[Sequence[object]], delimiter: str = ",") -> str:
    out = io.StringIO()
    writer = csv.writer(out, delimiter=delimiter, lineterminator="\n")
    writer.writerow(header)
    writer.writerows([neutralise(c) for c in row] for row in rows)
    return out.getvalue()


def spectrum_tsv(pairs: Iterable[tuple[int, int]]) -> str:
    """The frequency spectrum as TSV with columns m, V_m."""
    return table_text(["m", "V_m"], pairs, delimiter="\t")
