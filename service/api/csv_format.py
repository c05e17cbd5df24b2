"""``?format=csv`` or ``Accept: text/csv`` on the list routes: the same rows as CSV."""
from __future__ import annotations

from typing import Literal

from fastapi import Query, Request
from fastapi.responses import StreamingResponse

from ..exports import COLUMNS, csv_lines, export_lines, filename

CSV_TYPE = "text/csv; charset=utf-8"
#: For the routes' ``responses=``: the document then lists text/csv beside JSON.
CSV_RESPONSE = {200: {"content": {"text/csv": {"schema": {"type": "string"}}},
                      "description": "JSON, or CSV with ?format=csv or Accept: text/csv "
                                     "(every matching row; limit and offset are ignored)"}}
Format = Literal["json", "csv"]
FormatQuery = Query(None, description="csv for a CSV download of every matching row")


def wants_csv(request: Request, format: str | None) -> bool:
    """CSV when asked by ``format=csv``, or by an Accept header that prefers text/csv."""
    if format is not None:
        return format == "csv"
    accept = request.headers.get("accept", "")
    return "text/csv" in accept and "application/json" not in accept


def csv_response(monitor, export: str, facility_id: str | None = None,
                 cycle: int | None = None, **filters) -> StreamingResponse:
    """The export as a download. An unknown facility or cycle is raised here, before the
    response starts, so it is still a problem+json answer."""
    if export == "records":
        listing = monitor.records(facility_id, cycle)
        cycle = listing["cycle"]
        lines = csv_lines(COLUMNS[export], listing["items"])
    else:
        if facility_id is not None:
            filters["facility_id"] = facility_id
        if cycle is not None:
            filters["cycle"] = cycle
        lines = export_lines(monitor, export, **filters)
    name = filename(export, facility_id, cycle)
    return StreamingResponse(lines, media_type=CSV_TYPE,
                             headers={"Content-Disposition": f'attachment; filename="{name}"'})
