from fastapi import APIRouter, Depends
from fastapi.responses import PlainTextResponse

from ..operations import Monitor
from .deps import analyst, monitor

router = APIRouter(tags=["metrics"])


@router.get("/metrics", response_class=PlainTextResponse,
            summary="Prometheus text format (analyst)")
def metrics(actor=Depends(analyst), m: Monitor = Depends(monitor)):
    return PlainTextResponse(m.metrics_text(),
                             media_type="text/plain; version=0.0.4; charset=utf-8")
