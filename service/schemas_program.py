"""Schemas of the audit program's answers (GET only: nothing is created)."""
from __future__ import annotations

from pydantic import BaseModel


class ForecastTotals(BaseModel):
    open_cycles: int
    expected_false_flags: float
    expected_missed: float
    expected_audits_p0: float
    expected_audits_p1: float


class ForecastCyclePublic(BaseModel):
    facility_id: str
    cycle: int
    plan: str
    region: str | None
    units: int
    nonconforming: int
    llr: float
    p_flag_p0: float
    p_clear_p0: float
    p_flag_p1: float
    p_clear_p1: float
    further_p0: float
    further_p1: float
    further_p0_q50: int
    further_p0_q90: int
    further_p1_q50: int
    further_p1_q90: int


class WeeksAtRate(BaseModel):
    weeks_50: float
    weeks_50_se: float | None = None
    weeks_90: float
    weeks_90_se: float | None = None


class ForecastWeeks(BaseModel):
    budget: int
    runs: int
    seed: int
    model: str | None = None
    p0: WeeksAtRate
    p1: WeeksAtRate


class ForecastPublic(BaseModel):
    region: str | None
    totals: ForecastTotals
    cycles: list[ForecastCyclePublic]
    weeks: ForecastWeeks | None = None
    caution: str


class VisitPublic(BaseModel):
    rank: int
    facility_id: str
    name: str
    region: str | None
    plan: str
    cycle: int
    units: int
    score: float
    units_so_far: int
    nonconforming_so_far: int
    position: float
    reason: str
    unit_refs: list[str] | None = None


class VisitsPublic(BaseModel):
    budget: int
    region: str | None
    per_visit: int
    open_cycles: int
    facilities: int
    units: int
    visits: list[VisitPublic]
    score: str
