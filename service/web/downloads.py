"""Dashboard downloads: the CSV exports of service/exports.py behind the session cookie."""
from __future__ import annotations

from fastapi import APIRouter, Depends, Request
from fastapi.responses import StreamingResponse

from ..errors import ServiceError
from ..exports import COLUMNS, csv_lines, export_lines, filename
from ..operations import Monitor
from .routes import KINDS, SORTS, STATUS_TEXT, monitor
from .sessions import UiUser, current_user

router = APIRouter(prefix="/ui", include_in_schema=False)
CSV_TYPE = "text/csv; charset=utf-8"


class AdminOnly(ServiceError):
    status, title, slug = 403, "Forbidden", "forbidden"


def _download(lines, name: str) -> StreamingResponse:
    return StreamingResponse(lines, media_type=CSV_TYPE,
                             headers={"Content-Disposition": f'attachment; filename="{name}"'})


@router.get("/facilities.csv")
def facilities_csv(q: str = "", status: str = "", plan: str = "", sort: str = "llr_position",
                   dir: str = "desc", user: UiUser = Depends(current_user),
                   m: Monitor = Depends(monitor)):
    """The overview's facilities, with its filters, every page."""
    lines = export_lines(m, "facilities", status=status if status in STATUS_TEXT else None,
                         plan=plan if plan in m.plans.specs else None,
                         search=q.strip() or None, sort=sort if sort in SORTS else "llr_position",
                         descending=dir != "asc")
    return _download(lines, filename("facilities"))


@router.get("/facilities/{facility_id}/cycles/{cycle}/records.csv")
def records_csv(facility_id: str, cycle: int, user: UiUser = Depends(current_user),
                m: Monitor = Depends(monitor)):
    listing = m.records(facility_id, cycle)
    return _download(csv_lines(COLUMNS["records"], listing["items"]),
                     filename("records", facility_id, cycle))


@router.get("/alerts.csv")
def alerts_csv(state: str = "open", kind: str = "", facility_id: str = "",
               user: UiUser = Depends(current_user), m: Monitor = Depends(monitor)):
    lines = export_lines(m, "alerts", state=state if state in ("open", "acknowledged") else None,
                         kind=kind if kind in KINDS else None,
                         facility_id=facility_id.strip() or None)
    return _download(lines, filename("alerts"))


@router.get("/actions.csv")
def actions_csv(request: Request, user: UiUser = Depends(current_user),
                m: Monitor = Depends(monitor)):
    if user.role != "admin":
        raise AdminOnly("The action log is for admin keys; sign in with an admin key to "
                        "download it.")
    return _download(export_lines(m, "actions"), filename("actions"))
