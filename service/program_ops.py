"""The audit program's operations: store rows in, the pure program functions, answers out.

Shared by the API (service/api/program.py), the CLI (service/commands/program.py)
and the dashboard. No SQL here (queries in service/store/program.py), no HTTP.
"""
from __future__ import annotations

import csv
import io
import itertools
import json
import struct

import numpy as np

from . import program
from .errors import Invalid
from .store import plan_of
from .time_columns import micros, utc_micros

#: Largest weekly budget accepted (audits a week); far above any office's capacity.
MAX_BUDGET = 1_000_000
MAX_RUNS = 5000


def check_budget(budget) -> int:
    if budget is None:
        return None
    if isinstance(budget, bool) or not isinstance(budget, int) or budget < 1:
        raise Invalid(f"budget must be a whole number of audits a week of at least 1, "
                      f"got {budget!r}", field="budget")
    if budget > MAX_BUDGET:
        raise Invalid(f"budget must be at most {MAX_BUDGET}, got {budget}", field="budget")
    return budget


def check_region(store, region: str | None) -> str | None:
    if region is None:
        return None
    if not store.region_known(region):
        known = store.regions()
        listed = ", ".join(known) if known else "none registered"
        raise Invalid(f"unknown region {region!r}; regions: {listed}", field="region")
    return region


def forecast(store, region: str | None = None, budget: int | None = None,
             runs: int = program.RUNS, seed: int = program.SEED) -> dict:
    """The register forecast of the open cycles (of one region)."""
    region = check_region(store, region)
    budget = check_budget(budget)
    if isinstance(runs, bool) or not isinstance(runs, int) or not 2 <= runs <= MAX_RUNS:
        raise Invalid(f"runs must be a whole number from 2 to {MAX_RUNS}, got {runs!r}",
                      field="runs")
    c = store.open_cycle_columns(region)
    plans = {key: plan_of(key) for key in set(c["plan_json"])}
    out = program.forecast_columns(c["facility_id"], c["cycle"], c["plan_json"], plans,
                                   c["units"], c["nonconforming"], budget=budget, runs=runs,
                                   seed=seed)
    for row, plan, reg in zip(out["cycles"], c["plan"], c["region"]):
        row["plan"] = plan
        row["region"] = reg
    out["region"] = region
    return out


def _age_days(since: list, now: str) -> np.ndarray:
    """Days from each cycle's last record (or its opening) to ``now``.

    Stored times are UTC text of one width, ``YYYY-MM-DDTHH:MM:SS.ffffffZ``, read all at
    once by :func:`service.time_columns.utc_micros`; the difference is taken in whole
    microseconds before it becomes days.
    """
    return (micros(now) - utc_micros(since)).astype(np.float64) / 86_400e6


def _int64(values: list) -> np.ndarray:
    """A list of Python ints as an int64 array (packed in C: about half the cost of
    ``np.asarray`` on a list)."""
    try:
        return np.frombuffer(struct.pack(f"{len(values)}q", *values), np.int64)
    except struct.error:
        return np.asarray(values, dtype=np.int64)


_SLOTS = range(256)


def _snapshot_slots(snapshots: list) -> tuple[dict, np.ndarray]:
    """Each distinct snapshot text with its slot, and every row's slot, in one dict pass.

    ``setdefault`` keeps the slot offered when a text first appears; the slots offered
    cycle through 0-255 (small ints that Python keeps: nothing is allocated per row).
    Two texts first seen a multiple of 256 rows apart would share a slot: then the
    offered slot is the row number instead.
    """
    size = len(snapshots)
    first: dict[str, int] = {}
    at = np.frombuffer(struct.pack(f"{size}B", *map(first.setdefault, snapshots,
                                                    itertools.cycle(_SLOTS))), np.uint8)
    if len(set(first.values())) < len(first):
        first.clear()
        at = np.frombuffer(struct.pack(f"{size}q", *map(first.setdefault, snapshots,
                                                        range(size))), np.int64)
    return first, at


def _plan_columns(snapshots: list, plans, stale_default) -> np.ndarray:
    """(upper, lower, g1, g2, stale days) of each cycle's plan snapshot, shape (5, size):
    worked out once per distinct snapshot, then gathered per row."""
    first, at = _snapshot_slots(snapshots)
    table = np.empty((5, max(first.values(), default=0) + 1))
    for key, slot in first.items():
        pl = plan_of(key)
        name = json.loads(key).get("name")
        spec = plans.specs.get(name) if plans is not None and name else None
        days = spec.stale_after_days if spec is not None and spec.stale_after_days else None
        table[:, slot] = (pl.upper_llr, pl.lower_llr, pl.g1, pl.g2,
                          days or stale_default or 14.0)
    return np.take(table, at, axis=1)


def visits(store, plans, now: str, budget: int, region: str | None = None,
           per_visit: int = program.PER_VISIT, stale_default: float | None = 14.0,
           watch_high=None, draw_units=None) -> dict:
    """This week's visits under ``budget`` audits.

    ``watch_high(facility_ids) -> set`` and ``draw_units(facility_id, k) -> list`` are the
    hooks for the watch chart and for open draws (units in draw order); without them no
    facility counts as high and units are not named.
    """
    budget = check_budget(budget)
    if budget is None:
        raise Invalid("budget is required: audits available this week", field="budget")
    region = check_region(store, region)
    if isinstance(per_visit, bool) or not isinstance(per_visit, int) or not 1 <= per_visit <= 1000:
        raise Invalid(f"per_visit must be a whole number from 1 to 1000, got {per_visit!r}",
                      field="per_visit")
    c = store.open_cycle_columns(region)
    ids = c["facility_id"]
    size = len(ids)
    upper, lower, g1, g2, stale_days = _plan_columns(c["plan_json"], plans, stale_default)
    high = watch_high(ids) if watch_high is not None else set()
    x = program.VisitInputs(
        n=_int64(c["units"]), d=_int64(c["nonconforming"]),
        upper=upper, lower=lower, g1=g1, g2=g2,
        age_days=_age_days(c["since"], now), stale_days=stale_days,
        watch_high=np.fromiter(map(high.__contains__, ids), bool, count=size) if high
        else np.zeros(size, dtype=bool))
    s = program.visit_scores(x, per_visit)
    chosen, give = program.serve(s.units, s.score, budget)   # rows come in facility_id order
    # the served rows' figures as Python numbers, gathered once
    parts = {k: v[chosen].tolist() for k, v in s.parts.items()}
    score, position, to_clear, to_flag, n, d, age, stale = (
        a[chosen].tolist() for a in (s.score, s.position, s.to_clear, s.to_flag, x.n, x.d,
                                     x.age_days, x.stale_days))
    items = []
    for j, (i, k) in enumerate(zip(chosen.tolist(), give.tolist())):
        item = {"rank": j + 1, "facility_id": ids[i], "name": c["name"][i],
                "region": c["region"][i], "plan": c["plan"][i], "cycle": c["cycle"][i],
                "units": k, "score": round(score[j], 4),
                "units_so_far": n[j], "nonconforming_so_far": d[j],
                "position": round(position[j], 4),
                "reason": program.reason(parts, j, position[j], to_clear[j], to_flag[j],
                                         age[j], stale[j], per_visit)}
        if draw_units is not None:
            item["unit_refs"] = draw_units(ids[i], k)
        items.append(item)
    return {"budget": budget, "region": region, "per_visit": per_visit,
            "open_cycles": size, "facilities": len(items),
            "units": sum(give.tolist()), "visits": items,
            "score": "documented in the README, 'Running the audit program'"}


VISIT_COLUMNS = ("rank", "facility_id", "name", "region", "plan", "cycle", "units", "score",
                 "units_so_far", "nonconforming_so_far", "reason")


def _cell(value) -> str:
    """A CSV cell; text that a spreadsheet would run as a formula gets a leading quote."""
    if value is None:
        return ""
    text = str(value)
    if isinstance(value, str) and text[:1] in ("=", "+", "-", "@", "\t", "\r"):
        return "'" + text
    return text


def visits_csv(answer: dict) -> str:
    """The visit list as CSV (one row per facility)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\r\n")
    w.writerow(VISIT_COLUMNS)
    for item in answer["visits"]:
        w.writerow([_cell(item.get(c)) for c in VISIT_COLUMNS])
    return buf.getvalue()


def hooks(store) -> dict:
    """The watch-chart and open-draw hooks the store offers, when those features exist.

    Open draws: a store with ``assignments()`` (drawn units not yet re-checked of open
    cycles, rows ``{facility_id, draw_id, draw_order, unit_ref}`` in draw order) or with
    ``draw_next_units(facility_id, k)`` names each visit's units in draw order. The watch
    chart: a store with ``watch_high_facilities(ids) -> set`` marks facilities whose chart
    is high. Without them the visit list names facilities and numbers of units only.
    """
    out = {}
    if hasattr(store, "watch_high_facilities"):
        out["watch_high"] = store.watch_high_facilities
    if hasattr(store, "draw_next_units"):
        out["draw_units"] = store.draw_next_units
    elif hasattr(store, "assignments"):
        out["draw_units"] = _draw_order_lookup(store)
    return out


def _draw_order_lookup(store):
    """draw_units(facility_id, k) from the pending drawn units, read once when first asked."""
    pending: dict[str, list[str]] | None = None

    def draw_units(facility_id: str, k: int) -> list[str] | None:
        nonlocal pending
        if pending is None:
            pending = {}
            for row in store.assignments():
                pending.setdefault(row["facility_id"], []).append(row["unit_ref"])
        refs = pending.get(facility_id)
        return refs[:k] if refs else None

    return draw_units
