"""Dashboard pages of the audit program: register forecast and this week's visits.

Same operations as the API (service/program_ops.py); bad input is shown on the
page with status 422.
"""
from __future__ import annotations

import math
from urllib.parse import quote, urlencode

from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse, Response

from .. import program_ops
from ..errors import ServiceError
from ..operations import Monitor
from ..program import PER_VISIT
from .routes import monitor, page
from .sessions import UiUser, current_user

router = APIRouter(prefix="/ui", include_in_schema=False)
ROWS = 50


def _whole(text: str, name: str) -> int | None:
    text = (text or "").strip()
    if not text:
        return None
    try:
        return int(text)
    except ValueError:
        raise ServiceError(f"{name} must be a whole number, got {text!r}") from None


@router.get("/program", response_class=HTMLResponse)
def forecast_page(request: Request, region: str = "", budget: str = "", page_no: int = 1,
                  user: UiUser = Depends(current_user), m: Monitor = Depends(monitor)):
    query = {"region": region, "budget": budget}
    error, result, status = None, None, 200
    try:
        result = program_ops.forecast(m.store, region=region or None,
                                      budget=_whole(budget, "The weekly budget"))
    except ServiceError as exc:
        error, status = exc.detail, 422
    rows, pages = [], 1
    page_no = max(page_no, 1)
    if result is not None:
        pages = max(1, math.ceil(len(result["cycles"]) / ROWS))
        rows = result["cycles"][(page_no - 1) * ROWS:page_no * ROWS]
    return page(request, "program.html", user, status=status, result=result, rows=rows,
                error=error, query=query, regions=m.store.regions(), page_no=page_no,
                pages=pages, qs=lambda **kw: urlencode({**query, **kw}))


def _visits(m: Monitor, request: Request, budget: str, region: str, per_visit: str):
    settings = request.app.state.settings
    number = _whole(budget, "The budget")
    if number is None:
        raise ServiceError("Give the number of audits available this week.")
    return program_ops.visits(m.store, m.plans, m.clock(), number, region=region or None,
                              per_visit=_whole(per_visit, "Units per visit") or PER_VISIT,
                              stale_default=settings.schedule.stale_after_days,
                              **program_ops.hooks(m.store))


@router.get("/program/visits", response_class=HTMLResponse)
def visits_page(request: Request, budget: str = "40", region: str = "",
                per_visit: str = str(PER_VISIT), user: UiUser = Depends(current_user),
                m: Monitor = Depends(monitor)):
    query = {"budget": budget, "region": region, "per_visit": per_visit}
    error, result, status = None, None, 200
    try:
        result = _visits(m, request, budget, region, per_visit)
    except ServiceError as exc:
        error, status = exc.detail, 422
    return page(request, "visits.html", user, status=status, result=result, error=error,
                query=query, regions=m.store.regions(), csv_qs=urlencode(query))


@router.get("/program/visits.csv")
def visits_csv(request: Request, budget: str = "40", region: str = "",
               per_visit: str = str(PER_VISIT), user: UiUser = Depends(current_user),
               m: Monitor = Depends(monitor)):
    result = _visits(m, request, budget, region, per_visit)
    name = "visits" + (f"-{region}" if region else "") + ".csv"
    return Response(program_ops.visits_csv(result), media_type="text/csv; charset=utf-8",
                    headers={"Content-Disposition":
                             f"attachment; filename*=UTF-8''{quote(name, safe='')}"})
