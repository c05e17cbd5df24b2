from fastapi import APIRouter, Depends

from ..operations import Monitor
from .deps import monitor

router = APIRouter(tags=["health"])


@router.get("/healthz", summary="Liveness and database check (no key needed)")
def healthz(m: Monitor = Depends(monitor)) -> dict:
    m.store.read("SELECT 1")
    return {"status": "ok"}
