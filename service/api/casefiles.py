from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import Response

from ..casefile import build_casefile
from ..exports import file_safe
from ..heavy import run_heavy
from ..heavy_jobs import casefile_json_job, casefile_pdf_job
from ..operations import Monitor
from ..schemas import CaseFilePublic
from ..store.fingerprints import cycle_fingerprint
from .deps import Id, analyst, monitor

router = APIRouter(prefix="/v1/facilities", tags=["case files"])

Level = Query(0.95, gt=0, lt=1, description="confidence level, e.g. 0.90, 0.95, 0.99")
BUSY = {503: {"description": "Busy (Retry-After) or the case file took too long"}}


async def casefile(request: Request, m: Monitor, kind: str, facility_id: str, cycle: int,
                   level: float):
    """A case file built in the heavy pool (service/heavy.py), cached until the cycle
    changes (a void, a finding, a later record)."""
    job = casefile_pdf_job if kind == "pdf" else casefile_json_job
    fingerprint = cycle_fingerprint(m.store, facility_id, cycle)
    if fingerprint is None or fingerprint[0] not in ("flagged", "cleared"):
        build_casefile(m.store, facility_id, cycle, level)   # raises 404 / 409 at once
    key = (kind, str(m.store.path), facility_id, cycle, level, fingerprint)
    return await run_heavy(request.app.state, job, str(m.store.path), facility_id, cycle,
                           level, key=key)


def attachment(facility_id: str, cycle: int) -> dict:
    return {"Content-Disposition": f'attachment; filename="casefile-{file_safe(facility_id)}'
                                   f'-cycle{cycle}.pdf"'}


@router.get("/{facility_id}/cycles/{cycle}/casefile.json", response_model=CaseFilePublic,
            responses=BUSY, summary="Case file of a decided cycle as JSON (analyst)")
async def casefile_json(request: Request, facility_id: str, cycle: Id, ci_level: float = Level,
                        actor=Depends(analyst), m: Monitor = Depends(monitor)):
    return await casefile(request, m, "json", facility_id, cycle, ci_level)


@router.get("/{facility_id}/cycles/{cycle}/casefile.pdf", response_class=Response,
            responses={200: {"content": {"application/pdf": {}}}, **BUSY},
            summary="Case file of a decided cycle as PDF (analyst)")
async def casefile_pdf(request: Request, facility_id: str, cycle: Id, ci_level: float = Level,
                       actor=Depends(analyst), m: Monitor = Depends(monitor)):
    pdf = await casefile(request, m, "pdf", facility_id, cycle, ci_level)
    return Response(pdf, media_type="application/pdf", headers=attachment(facility_id, cycle))
