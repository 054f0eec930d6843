"""CSV cells a spreadsheet will not run, for every CSV export of fleetsvc.

A spreadsheet opening a CSV treats a cell that begins with ``=``, ``+``, ``-`` or ``@`` (and, in
some programs, a tab or carriage return before them) as a formula — a plate, a note or a user name
typed as ``=HYPERLINK(…)`` would run on the manager's machine (OWASP, "CSV Injection"). Such a
cell is written with a leading apostrophe, which spreadsheets show as text and do not evaluate.

A plain number stays a number: ``-0.12``, ``+3``, ``-1.5e-3`` are written as they are, so negative
toe and camber stay numeric. Numbers passed as ``int``/``float`` are never escaped.

Use :func:`safe_cell` / :func:`safe_row` with any ``csv.writer``, or :func:`csv_response` for a
whole download (UTF-8 with a byte-order mark, as spreadsheets expect; a filename reduced to safe
characters).
"""
from __future__ import annotations

import csv
import math
import re
from collections.abc import Iterable, Sequence

from django.http import HttpResponse

FORMULA_LEADS = ("=", "+", "-", "@", "\t", "\r")
PLAIN_NUMBER = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?")
_FILENAME_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")


def safe_cell(value) -> str:
    """The text of one cell, with a leading apostrophe if a spreadsheet would run it."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return repr(value) if math.isfinite(value) else ""
    text = str(value)
    lead = text.lstrip(" ")
    if lead.startswith(FORMULA_LEADS) and not PLAIN_NUMBER.fullmatch(text):
        return "'" + text
    return text


def safe_row(row: Iterable) -> list[str]:
    return [safe_cell(value) for value in row]


def safe_filename(name: str, default: str = "export.csv") -> str:
    """A Content-Disposition filename of letters, digits, dot, dash and underscore only."""
    clean = re.sub(r"\.{2,}", ".", _FILENAME_UNSAFE.sub("-", name)).strip("-.")
    return clean or default


def csv_response(filename: str, header: Sequence[str], rows: Iterable[Sequence]) -> HttpResponse:
    """A CSV download whose every cell went through :func:`safe_cell`."""
    response = HttpResponse(content_type="text/csv; charset=utf-8")
    response["Content-Disposition"] = f'attachment; filename="{safe_filename(filename)}"'
    response["X-Content-Type-Options"] = "nosniff"
    response.write("\ufeff")
    writer = csv.writer(response, lineterminator="\r\n")
    writer.writerow(safe_row(header))
    for row in rows:
        writer.writerow(safe_row(row))
    return response
