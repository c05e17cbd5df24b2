from fastapi import APIRouter, Depends, Query

from ..operations import Monitor
from ..schemas import PlanPublic
from .deps import analyst, monitor

router = APIRouter(prefix="/v1/plans", tags=["plans"])


@router.get("", response_model=list[PlanPublic], summary="Configured plans with exact figures")
def list_plans(actor=Depends(analyst), m: Monitor = Depends(monitor)):
    return [m.plans.public(name) for name in sorted(m.plans.specs)]


@router.get("/{name}", response_model=PlanPublic, summary="One configured plan")
def get_plan(name: str, rate: list[float] = Query(default=[], max_length=20,
                                                   description="true rates for at_rates"),
             actor=Depends(analyst), m: Monitor = Depends(monitor)):
    from ..errors import Invalid
    from ..stats import PlanInputError
    try:
        return m.plans.public(name, rates=tuple(rate))
    except PlanInputError as exc:
        raise Invalid(str(exc), field="rate") from None
