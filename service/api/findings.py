from fastapi import APIRouter, Depends, Path

from ..operations import Monitor
from ..schemas import FindingCreate, FindingPublic
from .deps import MAX_ID, analyst, monitor

router = APIRouter(prefix="/v1/facilities", tags=["facilities"])


@router.post("/{facility_id}/cycles/{cycle}/findings", status_code=201,
             response_model=FindingPublic,
             summary="Record what the review of a flagged or cleared cycle found (analyst)")
def add_finding(facility_id: str, body: FindingCreate, cycle: int = Path(ge=1, le=MAX_ID),
                actor=Depends(analyst), m: Monitor = Depends(monitor)):
    """Several findings per cycle are allowed; each goes on the action log (and on the
    tamper-evident trail where the service keeps one). Shown in GET /v1/facilities/{id}."""
    return m.add_finding(facility_id, cycle, body.outcome, body.note, actor)
