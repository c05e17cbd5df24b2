"""Calendar jobs: stale-cycle reminders and re-monitoring of cleared facilities."""
from __future__ import annotations

from datetime import timedelta
from typing import Callable

from ..clock import format_time, parse_rfc3339
from ..operations import PlanBook
from ..store import Store

SCHEDULER = ("scheduler", "admin")


def _cutoffs(plans: PlanBook, now: str, days_of) -> dict[str, str]:
    moment = parse_rfc3339(now)
    out = {}
    for name, spec in plans.specs.items():
        days = days_of(spec)
        if days is not None:
            out[name] = format_time(moment - timedelta(days=float(days)))
    return out


def raise_stale_alerts(store: Store, plans: PlanBook, clock: Callable[[], str],
                       default_days: float | None) -> list[tuple[str, int]]:
    """One ``stale`` alert per open cycle that has had no record for its plan's
    ``stale_after_days`` (or the [schedule] default)."""
    now = clock()
    cutoffs = _cutoffs(plans, now, lambda s: s.stale_after_days if s.stale_after_days is not None
                       else default_days)
    raised = []
    for c in store.stale_candidates(cutoffs):
        since = c["last_record_at"] or c["opened_at"]
        days = (parse_rfc3339(now) - parse_rfc3339(since)).total_seconds() / 86400
        detail = {"since": since, "idle_days": round(days, 3), "plan": c["plan_name"],
                  "reason": "no record received" if c["last_record_at"] is None
                  else "no new record"}
        if store.raise_stale(c["facility_id"], c["cycle"], detail, now):
            raised.append((c["facility_id"], c["cycle"]))
    return raised


def remonitor_cleared(store: Store, plans: PlanBook, clock: Callable[[], str]) -> list[tuple[str, int]]:
    """Open a new cycle for each cleared facility whose plan sets ``remonitor_after_days``
    once that long has passed since the clearing decision."""
    now = clock()
    cutoffs = _cutoffs(plans, now, lambda s: s.remonitor_after_days)
    opened = []
    from ..errors import Conflict
    for c in store.remonitor_candidates(cutoffs):
        try:
            new = store.open_cycle(c["facility_id"], plans.snapshot(c["plan"]), now, SCHEDULER)
        except Conflict:  # someone opened one meanwhile
            continue
        opened.append((c["facility_id"], new))
    return opened
