from typing import Literal
from urllib.parse import quote

from fastapi import APIRouter, Depends, Query, Request, Response

from ..operations import Monitor
from ..schemas import FacilityCreate, FacilityPage, FacilityPublic, FacilityStatus, \
    ReasonCreate, RecordList
from .csv_format import CSV_RESPONSE, Format, FormatQuery, csv_response, wants_csv
from .deps import CycleNo, Offset, admin, analyst, monitor

router = APIRouter(prefix="/v1/facilities", tags=["facilities"])

Sort = Literal["facility_id", "name", "units", "last_record_at", "llr", "llr_position"]


@router.post("", status_code=201, response_model=FacilityPublic,
             summary="Register a facility under a configured plan (admin)")
def register(body: FacilityCreate, response: Response, actor=Depends(admin),
             m: Monitor = Depends(monitor)):
    out = m.register_facility(body, actor)
    # one path segment, percent-encoded (a header value must be Latin-1; 'Łódź-1' is not)
    response.headers["Location"] = f"/v1/facilities/{quote(body.facility_id, safe='')}"
    return out


@router.get("", response_model=FacilityPage, summary="List facilities (analyst)",
            responses=CSV_RESPONSE)
def list_facilities(request: Request, status: FacilityStatus | None = None,
                    plan: str | None = None,
                    q: str | None = Query(None, max_length=100, description="id or name contains"),
                    sort: Sort = "facility_id", descending: bool = False,
                    limit: int = Query(100, ge=1, le=1000), offset: Offset = 0,
                    format: Format | None = FormatQuery,
                    region: str | None = Query(None, max_length=64,
                                               description="facilities of one region"),
                    actor=Depends(analyst), m: Monitor = Depends(monitor)):
    if wants_csv(request, format):
        if region is not None:   # refused before the download starts
            from ..program_ops import check_region
            check_region(m.store, region)
        return csv_response(m, "facilities", status=status, plan=plan, search=q, sort=sort,
                            descending=descending, region=region)
    return m.facilities(status=status, plan=plan, search=q, sort=sort, descending=descending,
                        limit=limit, offset=offset, region=region)


@router.get("/{facility_id}", response_model=FacilityPublic,
            summary="A facility's state and cycle history (analyst)")
def get_facility(facility_id: str, actor=Depends(analyst), m: Monitor = Depends(monitor)):
    return m.facility(facility_id)


@router.get("/{facility_id}/records", response_model=RecordList,
            summary="Records of a cycle in receipt order, with the LLR after each, one page at "
                    "a time (analyst); as CSV, every record of the cycle",
            responses=CSV_RESPONSE)
def records(request: Request, facility_id: str, cycle: CycleNo = None,
            limit: int = Query(1000, ge=1, le=10_000), offset: Offset = 0,
            format: Format | None = FormatQuery, actor=Depends(analyst),
            m: Monitor = Depends(monitor)):
    if wants_csv(request, format):
        return csv_response(m, "records", facility_id=facility_id, cycle=cycle)
    return m.records(facility_id, cycle, limit=limit, offset=offset)


@router.post("/{facility_id}/cycles", status_code=201, response_model=FacilityPublic,
             summary="Open the next monitoring cycle when none is open (analyst)")
def open_cycle(facility_id: str, actor=Depends(analyst), m: Monitor = Depends(monitor)):
    return m.open_cycle(facility_id, actor)


@router.post("/{facility_id}/close", response_model=FacilityPublic,
             summary="Close the open cycle without a decision (analyst)")
def close_cycle(facility_id: str, body: ReasonCreate, actor=Depends(analyst),
                m: Monitor = Depends(monitor)):
    return m.close_cycle(facility_id, body.reason, actor)
