"""CSV exports of facilities, a cycle's records, alerts and the action log.

One module for the API (``?format=csv`` or ``Accept: text/csv``), the dashboard's download
buttons and ``seqaudit export``. Columns are the fields of the matching ``*Public`` schema,
in order; nested values (an alert's detail) are written as JSON text; None is an empty
cell. Text that a spreadsheet would read as a formula (starting with ``=``, ``+``, ``-``,
``@``, a tab or a carriage return) is prefixed with an apostrophe, as OWASP's "CSV
Injection" page advises; numbers are written as they are. Rows are fetched a page at a time,
so memory stays bounded whatever the size of the table.
"""
from __future__ import annotations

import csv
import io
import json
from typing import Any, Callable, Iterable, Iterator

from .schemas import ActionPublic, AlertPublic, FacilityPublic, RecordPublic

PAGE = 1000
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
KINDS = ("facilities", "records", "alerts", "actions")

#: Columns of each export: the public schema's fields, less nested lists.
COLUMNS = {
    "facilities": [f for f in FacilityPublic.model_fields if f != "cycles"],
    "records": list(RecordPublic.model_fields),
    "alerts": list(AlertPublic.model_fields),
    "actions": list(ActionPublic.model_fields),
}


def cell(value: Any) -> str | int | float:
    """One CSV cell: numbers as they are, booleans as true/false, JSON for nested values."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return value
    if isinstance(value, (dict, list)):
        value = json.dumps(value, sort_keys=True, ensure_ascii=False)
    text = str(value)
    return "'" + text if text.startswith(FORMULA_START) else text


def csv_lines(columns: list[str], rows: Iterable[dict]) -> Iterator[str]:
    """The header line, then one line per row (RFC 4180: CRLF line ends, quoted as needed)."""
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\r\n")
    writer.writerow(columns)
    yield buf.getvalue()
    for row in rows:
        buf.seek(0)
        buf.truncate()
        writer.writerow([cell(row.get(c)) for c in columns])
        yield buf.getvalue()


def paged(fetch: Callable[[int, int], dict]) -> Iterator[dict]:
    """Every item of a paged listing (``fetch(limit, offset) -> {"items", "total"}``)."""
    offset = 0
    while True:
        page = fetch(PAGE, offset)
        yield from page["items"]
        offset += len(page["items"])
        if not page["items"] or offset >= page["total"]:
            return


def export_rows(monitor, export: str, **filters) -> Iterator[dict]:
    """Rows of one export from the same operations the API uses.

    ``facilities``: filters of the facility list; ``records``: ``facility_id`` and
    ``cycle`` (None for the current one); ``alerts`` and ``actions``: their list filters.
    """
    if export == "records":
        return iter(monitor.records(filters["facility_id"], filters.get("cycle"))["items"])
    method = {"facilities": monitor.facilities, "alerts": monitor.alerts,
              "actions": monitor.actions}[export]
    filters = {k: v for k, v in filters.items() if v is not None}
    return paged(lambda limit, offset: method(**filters, limit=limit, offset=offset))


def export_lines(monitor, export: str, **filters) -> Iterator[str]:
    return csv_lines(COLUMNS[export], export_rows(monitor, export, **filters))


def file_safe(text: str) -> str:
    """``text`` for a download's file name: ASCII letters, digits, ``-_.``; anything else
    ``_`` (a header value must be Latin-1, and a name must not carry a path)."""
    return "".join(ch if (ch.isascii() and ch.isalnum()) or ch in "-_." else "_" for ch in text)


def filename(kind: str, facility_id: str | None = None, cycle: int | None = None) -> str:
    """A safe download name, e.g. ``records-SA-301-cycle2.csv``."""
    parts = [kind]
    if facility_id:
        parts.append(file_safe(facility_id))
    if cycle:
        parts.append(f"cycle{cycle}")
    return "-".join(parts) + ".csv"
