"""CSV export of what a page shows; cells that a spreadsheet would run as a formula are escaped."""
from __future__ import annotations

import csv
from collections.abc import Iterable, Sequence

from django.http import HttpResponse

FORMULA_LEAD = ("=", "+", "-", "@", "\t", "\r")


def safe_cell(value) -> str:
    """Text of one cell; a leading = + - @ (or tab / CR) gets a leading apostrophe (OWASP)."""
    if value is None:
        return ""
    text = str(value)
    return "'" + text if text.startswith(FORMULA_LEAD) else text


def csv_response(filename: str, header: Sequence[str], rows: Iterable[Sequence]) -> HttpResponse:
    response = HttpResponse(content_type="text/csv; charset=utf-8")
    response["Content-Disposition"] = f'attachment; filename="{filename}"'
    writer = csv.writer(response)
    writer.writerow([safe_cell(h) for h in header])
    for row in rows:
        writer.writerow([safe_cell(c) for c in row])
    return response
