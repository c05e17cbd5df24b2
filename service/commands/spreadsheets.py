"""Rows of an .xlsx workbook (openpyxl) for the imports, with spreadsheet dates made explicit.

A spreadsheet keeps a date-time cell as a local date and time with no time zone. Such a cell
is turned into an RFC 3339 time only with a time zone named by the user (``--time-zone``, an
IANA name such as ``Europe/London`` or ``UTC``, or a fixed offset such as ``+01:00``); without
one the row is refused, never guessed. A local time that the zone's clock shows twice (the
hour when summer time ends) or never (the hour it begins) is refused as well. Text cells are
taken as written; whole numbers kept as numbers (e.g. ``units``) and as text where text is
expected (e.g. a facility id typed as 1001).
"""
from __future__ import annotations

import re
from datetime import date, datetime, time, timedelta, timezone, tzinfo
from pathlib import Path
from typing import Any

_OFFSET = re.compile(r"^([+-])(\d{2}):(\d{2})$")


class SpreadsheetError(ValueError):
    """A cell that cannot be taken as it is; the message says what to do."""


def parse_zone(name: str) -> tzinfo:
    """An IANA zone name (``Europe/Berlin``), ``UTC``/``Z``, or a fixed offset ``+01:00``."""
    if name in ("UTC", "Z", "utc", "z"):
        return timezone.utc
    m = _OFFSET.match(name)
    if m:
        sign, hours, minutes = m.groups()
        delta = timedelta(hours=int(hours), minutes=int(minutes))
        if delta >= timedelta(hours=24):
            raise ValueError(f"time zone offset {name!r} is out of range")
        return timezone(-delta if sign == "-" else delta)
    from zoneinfo import ZoneInfo, ZoneInfoNotFoundError
    try:
        return ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError):
        raise ValueError(f"unknown time zone {name!r}; give an IANA name such as "
                         "Europe/London, UTC, or an offset such as +01:00") from None


def local_to_rfc3339(value: datetime, zone: tzinfo) -> str:
    """A spreadsheet's local date-time in ``zone`` as RFC 3339 text with that zone's offset.

    Raises SpreadsheetError for a time the zone's clock shows twice or skips.
    """
    first = value.replace(tzinfo=zone, fold=0)
    second = value.replace(tzinfo=zone, fold=1)
    if first.utcoffset() != second.utcoffset():
        raise SpreadsheetError(
            f"{value.isoformat(sep=' ')} is ambiguous or does not exist in {zone} (a clock "
            "change); write this time as RFC 3339 text with its offset")
    # a skipped time comes back different after a round trip through UTC
    if first.astimezone(timezone.utc).astimezone(zone).replace(tzinfo=None) != value:
        raise SpreadsheetError(f"{value.isoformat(sep=' ')} does not exist in {zone} (a clock "
                               "change); write this time as RFC 3339 text with its offset")
    text = first.isoformat(timespec="microseconds" if value.microsecond else "seconds")
    return text[:-6] + "Z" if text.endswith("+00:00") else text


def cell_text(value: Any) -> Any:
    """A cell as the CSV reader would give it, except dates (kept for the caller)."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    if isinstance(value, (datetime, date, time)):
        return value
    return str(value)


def read_xlsx(path: Path, sheet: str | None = None) -> tuple[list[dict], list[str]]:
    """(rows as {column: cell}, header) of the first (or the named) worksheet.

    The first row is the header; trailing empty rows are dropped (an empty row in between
    stays, so that row numbers match the sheet); cells keep dates as datetime.
    """
    from openpyxl import load_workbook
    from openpyxl.utils.exceptions import InvalidFileException
    from zipfile import BadZipFile
    try:
        book = load_workbook(path, read_only=True, data_only=True)
    except (InvalidFileException, BadZipFile, KeyError) as exc:
        raise ValueError(f"{path}: not a readable .xlsx workbook ({exc})") from None
    try:
        if sheet is not None and sheet not in book.sheetnames:
            raise ValueError(f"{path}: no worksheet {sheet!r}; it has "
                             f"{', '.join(book.sheetnames)}")
        ws = book[sheet] if sheet else book.worksheets[0]
        it = ws.iter_rows(values_only=True)
        header = [str(c).strip() if c is not None else "" for c in next(it, ())]
        rows, blank = [], 0
        for values in it:
            if all(v is None or v == "" for v in values):
                blank += 1
                continue
            rows += [{h: "" for h in header if h} for _ in range(blank)]
            blank = 0
            rows.append({h: cell_text(v) for h, v in zip(header, values) if h})
        return rows, header
    finally:
        book.close()
