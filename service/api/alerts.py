from fastapi import APIRouter, Depends, Query, Request

from ..operations import Monitor
from ..schemas import AckCreate, AlertKind, AlertPage, AlertPublic
from typing import Literal
from .csv_format import CSV_RESPONSE, Format, FormatQuery, csv_response, wants_csv
from .deps import Id, Offset, analyst, monitor

router = APIRouter(prefix="/v1/alerts", tags=["alerts"])


@router.get("", response_model=AlertPage, summary="Alerts, newest first (analyst)",
            responses=CSV_RESPONSE)
def list_alerts(request: Request, state: Literal["open", "acknowledged"] | None = None,
                kind: AlertKind | None = None, facility_id: str | None = None,
                needs_review: bool | None = Query(
                    None, description="true: the review queue (flags, revised decisions, watch "
                                      "signals, stale cycles, failed deliveries); false: "
                                      "notices that only inform (clears, cap notices)"),
                limit: int = Query(100, ge=1, le=1000), offset: Offset = 0,
                format: Format | None = FormatQuery,
                actor=Depends(analyst), m: Monitor = Depends(monitor)):
    if wants_csv(request, format):
        return csv_response(m, "alerts", state=state, kind=kind, facility_id=facility_id,
                            needs_review=needs_review)
    return m.alerts(state=state, kind=kind, facility_id=facility_id, needs_review=needs_review,
                    limit=limit, offset=offset)


@router.post("/{alert_id}/ack", response_model=AlertPublic,
             summary="Acknowledge an alert with an optional note (analyst)")
def ack(alert_id: Id, body: AckCreate, actor=Depends(analyst), m: Monitor = Depends(monitor)):
    return m.ack_alert(alert_id, body.note, actor)
