from fastapi import APIRouter, Depends, Query, Request

from ..operations import Monitor
from ..schemas import ActionPage
from .csv_format import CSV_RESPONSE, Format, FormatQuery, csv_response, wants_csv
from .deps import CycleNo, Offset, admin, monitor

router = APIRouter(prefix="/v1/actions", tags=["actions"])


@router.get("", response_model=ActionPage, summary="The log of manual actions (admin)",
            responses=CSV_RESPONSE)
def list_actions(request: Request, facility_id: str | None = None, cycle: CycleNo = None,
                 limit: int = Query(100, ge=1, le=1000), offset: Offset = 0,
                 format: Format | None = FormatQuery,
                 actor=Depends(admin), m: Monitor = Depends(monitor)):
    if wants_csv(request, format):
        return csv_response(m, "actions", facility_id=facility_id, cycle=cycle)
    return m.actions(facility_id=facility_id, cycle=cycle, limit=limit, offset=offset)
