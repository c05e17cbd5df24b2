"""The audit program: register forecast and this week's visits (analyst)."""
from typing import Literal

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import Response

from .. import program_ops
from ..cautions import SIGNAL_NOT_VERDICT
from ..heavy import run_heavy
from ..heavy_jobs import forecast_job
from ..operations import Monitor
from ..program import PER_VISIT, RUNS, SEED
from ..schemas_program import ForecastPublic, VisitsPublic
from ..store.fingerprints import database_fingerprint
from .deps import analyst, monitor

router = APIRouter(prefix="/v1/program", tags=["program"])

Region = Query(None, max_length=64, description="limit to the facilities of one region")


@router.get("/forecast", response_model=ForecastPublic,
            summary="Exact figures of every open cycle from where it stands, and their sums")
async def forecast(request: Request, region: str | None = Region,
                   budget: int | None = Query(None, description="audits a week: adds weeks to "
                                              "decide 50 % and 90 % of the open cycles"),
                   runs: int = Query(RUNS, description="simulation runs for the weeks"),
                   seed: int = Query(SEED, ge=0, le=2 ** 63 - 1),
                   actor=Depends(analyst), m: Monitor = Depends(monitor)):
    # in the heavy pool (service/heavy.py), cached until a record or an action changes the data
    args = (str(m.store.path), region, budget, runs, seed)
    out = await run_heavy(request.app.state, forecast_job, *args,
                          key=("forecast", *args, database_fingerprint(m.store)))
    return {**out, "caution": SIGNAL_NOT_VERDICT}


@router.get("/visits", response_model=VisitsPublic,
            summary="Facilities to visit this week and units at each, under a budget",
            responses={200: {"content": {"text/csv": {}}}})
def visits(request: Request, budget: int = Query(..., description="audits available this week"),
           region: str | None = Region,
           per_visit: int = Query(PER_VISIT, description="most units at one facility"),
           format: Literal["json", "csv"] = "json",
           actor=Depends(analyst), m: Monitor = Depends(monitor)):
    settings = request.app.state.settings
    out = program_ops.visits(m.store, m.plans, m.clock(), budget, region=region,
                             per_visit=per_visit, stale_default=settings.schedule.stale_after_days,
                             **program_ops.hooks(m.store))
    if format == "csv":
        name = "visits" + (f"-{region}" if region else "") + ".csv"
        return Response(program_ops.visits_csv(out), media_type="text/csv; charset=utf-8",
                        headers={"Content-Disposition":
                                 f"attachment; filename*=UTF-8''{_quote(name)}"})
    return out


def _quote(name: str) -> str:
    from urllib.parse import quote
    return quote(name, safe="")
