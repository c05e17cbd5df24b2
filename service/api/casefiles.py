from fastapi import APIRouter, Depends, Query
from fastapi.responses import Response
from starlette.concurrency import run_in_threadpool

from ..casefile import build_casefile
from ..casefile.pdf import render_pdf
from ..exports import file_safe
from ..operations import Monitor
from ..schemas import CaseFilePublic
from .deps import Id, analyst, monitor

router = APIRouter(prefix="/v1/facilities", tags=["case files"])

Level = Query(0.95, gt=0, lt=1, description="confidence level, e.g. 0.90, 0.95, 0.99")


@router.get("/{facility_id}/cycles/{cycle}/casefile.json", response_model=CaseFilePublic,
            summary="Case file of a decided cycle as JSON (analyst)")
def casefile_json(facility_id: str, cycle: Id, ci_level: float = Level,
                  actor=Depends(analyst), m: Monitor = Depends(monitor)):
    return build_casefile(m.store, facility_id, cycle, ci_level)


@router.get("/{facility_id}/cycles/{cycle}/casefile.pdf", response_class=Response,
            responses={200: {"content": {"application/pdf": {}}}},
            summary="Case file of a decided cycle as PDF (analyst)")
async def casefile_pdf(facility_id: str, cycle: Id, ci_level: float = Level,
                       actor=Depends(analyst), m: Monitor = Depends(monitor)):
    cf = await run_in_threadpool(build_casefile, m.store, facility_id, cycle, ci_level)
    pdf = await run_in_threadpool(render_pdf, cf)
    safe = file_safe(facility_id)
    return Response(pdf, media_type="application/pdf", headers={
        "Content-Disposition": f'attachment; filename="casefile-{safe}-cycle{cycle}.pdf"'})
