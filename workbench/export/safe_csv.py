"""Spreadsheet-safe CSV: the formula-injection guard and the one CSV writer that applies it.

A spreadsheet reads a cell that starts with ``=``, ``+``, ``-`` or ``@`` (and,
in some programs, a tab or a carriage return) as a formula, so a column name, a
class label or a text cell taken from a user's table could run a formula when
the CSV is opened (OWASP, "CSV Injection"). :func:`neutralise_cell` makes one
cell inert; :func:`write_safe_csv` is the only CSV writer of the export and of
``workbench predict``, for files and for standard output alike, and it
neutralises every cell, header included.
"""

from __future__ import annotations

import csv
import math
import numbers
from collections.abc import Iterable
from pathlib import Path
from typing import TextIO

#: OWASP "CSV Injection": a cell starting with one of these is read as a formula
FORMULA_TRIGGERS = ("=", "+", "-", "@", "\t", "\r")


def neutralise_cell(value) -> str:
    """Make one CSV cell inert in a spreadsheet (OWASP CSV-injection advice).

    Text that begins with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return
    gets a leading single quote, so a spreadsheet shows it as text instead of
    evaluating it. Numbers are written as numbers (a float's text is never a
    formula); ``None`` and non-finite floats become an empty cell.
    """
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):  # NumPy's float64 too
        return repr(float(value)) if math.isfinite(value) else ""
    if isinstance(value, numbers.Integral):  # NumPy's integers (registered as Integral)
        return str(int(value))
    if isinstance(value, numbers.Real):  # NumPy's other floats
        v = float(value)
        return repr(v) if math.isfinite(v) else ""
    text = str(value)
    if text.startswith(FORMULA_TRIGGERS):
        return "'" + text
    return text


def _write_rows(stream: TextIO, header: Iterable, rows: Iterable[Iterable]) -> None:
    writer = csv.writer(stream, quoting=csv.QUOTE_MINIMAL)
    writer.writerow([neutralise_cell(h) for h in header])
    for row in rows:
        writer.writerow([neutralise_cell(v) for v in row])


def write_safe_csv(destination: str | Path | TextIO, header: Iterable,
                   rows: Iterable[Iterable]) -> None:
    """Write a CSV (UTF-8, RFC 4180 quoting) with every cell neutralised.

    Parameters
    ----------
    destination : path or text stream
        A file path (created or replaced, UTF-8) or an open text stream such as
        :data:`sys.stdout` (written to, not closed).
    header : iterable
        The column names (neutralised like any cell).
    rows : iterable of iterables
        One iterable of cell values per row.
    """
    if hasattr(destination, "write"):
        _write_rows(destination, header, rows)
        return
    with open(destination, "w", newline="", encoding="utf-8") as fh:
        _write_rows(fh, header, rows)
