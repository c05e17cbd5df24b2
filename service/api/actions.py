from fastapi import APIRouter, Depends, Query

from ..operations import Monitor
from ..schemas import ActionPage
from .deps import CycleNo, Offset, admin, monitor

router = APIRouter(prefix="/v1/actions", tags=["actions"])


@router.get("", response_model=ActionPage, summary="The log of manual actions (admin)")
def list_actions(facility_id: str | None = None, cycle: CycleNo = None,
                 limit: int = Query(100, ge=1, le=1000), offset: Offset = 0,
                 actor=Depends(admin), m: Monitor = Depends(monitor)):
    return m.actions(facility_id=facility_id, cycle=cycle, limit=limit, offset=offset)
