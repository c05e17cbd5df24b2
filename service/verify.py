"""Replay every cycle from its stored records and compare with the stored states.

The per-facility update folds :func:`service.monitor.apply_record` one record at a time;
for a whole database the same rule is evaluated on running counts with numpy (the first
record after which the LLR, computed from the counts, reaches a boundary or the cap), which
gives the same state — a test checks the two agree.
"""
from __future__ import annotations

import json
from dataclasses import dataclass

import numpy as np

from .monitor import CLOSED, CycleState
from .stats import MONITORING, SprtPlan
from .stats.sprt import BOUNDARY_TOL, CLEARED, FLAGGED
from .store import Store, plan_from_snapshot


def replay_counts(plan: SprtPlan, seq: np.ndarray, units: np.ndarray, bad: np.ndarray,
                  stop_seq: int | None = None) -> tuple[CycleState, np.ndarray]:
    """Vectorised replay of one cycle's live records (in receipt order)."""
    seq = np.asarray(seq, dtype=np.int64)
    if stop_seq is not None:
        keep = seq <= stop_seq
    else:
        keep = np.ones(seq.size, dtype=bool)
    n = np.cumsum(np.where(keep, units, 0))
    d = np.cumsum(np.where(keep, bad, 0))
    llr = d * (plan.g1 + plan.g2) - n * plan.g2
    up = llr >= plan.upper_llr - BOUNDARY_TOL
    down = llr <= plan.lower_llr + BOUNDARY_TOL
    cap = (n >= plan.max_units) if plan.max_units is not None else np.zeros(n.size, dtype=bool)
    stop = (up | down | cap) & keep
    counted = keep.copy()
    if not stop.any():
        return CycleState(status=MONITORING, units=int(n[-1]) if n.size else 0,
                          nonconforming=int(d[-1]) if d.size else 0), counted
    i = int(np.argmax(stop))
    counted[i + 1:] = False
    if up[i]:
        status = FLAGGED
    elif down[i]:
        status = CLEARED
    else:
        status = FLAGGED if llr[i] >= plan.cut_llr - BOUNDARY_TOL else CLEARED
    return CycleState(status=status, units=int(n[i]), nonconforming=int(d[i]),
                      decided_seq=int(seq[i]), decided_after_units=int(n[i]),
                      at_cap=bool(cap[i] and not up[i] and not down[i])), counted


@dataclass(frozen=True)
class VerifyReport:
    cycles: int
    records: int
    mismatches: list[dict]

    @property
    def ok(self) -> bool:
        return not self.mismatches


def verify_database(store: Store) -> VerifyReport:
    """Replay every cycle of the database and list any whose stored state differs."""
    cycles = {(c["facility_id"], c["cycle"]): c for c in store.read("SELECT * FROM cycles")}
    conn = store._conn()
    rows = conn.execute("SELECT facility_id, cycle, seq, units, nonconforming, counted FROM "
                        "records WHERE void = 0 ORDER BY facility_id, cycle, seq").fetchall()
    mismatches = []
    if rows:
        fac = [r[0] for r in rows]
        arr = np.array([r[1:] for r in rows], dtype=np.int64)
        codes: dict[str, int] = {}
        code = np.array([codes.setdefault(f, len(codes)) for f in fac], dtype=np.int64)
        change = (code[1:] != code[:-1]) | (arr[1:, 0] != arr[:-1, 0])
        bounds = np.flatnonzero(np.r_[True, change, True])
    else:
        fac, arr, bounds = [], np.zeros((0, 5), dtype=np.int64), np.array([0])
    seen = set()
    plans: dict[str, SprtPlan] = {}
    for a, b in zip(bounds[:-1], bounds[1:]):
        key = (fac[a], int(arr[a, 0]))
        seen.add(key)
        cyc = cycles.get(key)
        if cyc is None:
            mismatches.append({"facility_id": key[0], "cycle": key[1],
                               "problem": "records of a cycle that does not exist"})
            continue
        plan = plans.get(cyc["plan_json"])
        if plan is None:
            plan = plans[cyc["plan_json"]] = plan_from_snapshot(json.loads(cyc["plan_json"]))
        block = arr[a:b]
        state, counted = replay_counts(plan, block[:, 1], block[:, 2], block[:, 3],
                                       cyc["closed_seq"])
        _compare(cyc, state, counted, block[:, 4].astype(bool), mismatches)
    for key, cyc in cycles.items():
        if key not in seen:
            _compare(cyc, CycleState(), np.zeros(0, dtype=bool), np.zeros(0, dtype=bool),
                     mismatches)
    return VerifyReport(cycles=len(cycles), records=len(rows), mismatches=mismatches)


def _compare(cyc: dict, state: CycleState, counted, stored_counted, out: list) -> None:
    status = state.status
    if status == MONITORING and cyc["closed_seq"] is not None:
        status = CLOSED
    if status == MONITORING and cyc["status"] == CLOSED:
        status = CLOSED  # closed as undecided after a void while a later cycle was open
    want = (status, state.units, state.nonconforming, state.decided_after_units)
    have = (cyc["status"], cyc["units"], cyc["nonconforming"], cyc["decided_after_units"])
    if want != have or not np.array_equal(counted, stored_counted):
        out.append({"facility_id": cyc["facility_id"], "cycle": cyc["cycle"],
                    "stored": dict(zip(("status", "units", "nonconforming",
                                        "decided_after_units"), have)),
                    "replayed": dict(zip(("status", "units", "nonconforming",
                                          "decided_after_units"), want))})
